// libporebench_ompenv.so: makes OpenMP wait passively by default in porebench's executables.
// Why a library of its own: libgomp reads OMP_WAIT_POLICY / GOMP_SPINCOUNT once, in its own
// initialiser, before main. A setenv() from the executable's .preinit_array is lost (glibc's libc
// initialiser, which runs after it, sets environ back to the process's original envp), and the
// executable's own constructors run after libgomp's. The initialiser of a shared library runs after
// libc's (it depends on libc) and, being listed after libgomp in the executable's DT_NEEDED with no
// dependency between the two, before libgomp's (glibc initialises unrelated objects in reverse
// order of loading). CMakeLists.txt links it so; ctest omp_wait_policy checks that libgomp sees it.
// Passive: a worker with no work sleeps on a futex at once instead of spinning (libgomp's default
// spins ~300k iterations), which on a shared machine burns the slices the busy threads need
// (bench/README: omp_wait.py, BM_NeuralHarness at 2 threads).
#include <cstdlib>

namespace {

__attribute__((constructor)) void omp_passive_by_default() {
  if (!std::getenv("OMP_WAIT_POLICY") && !std::getenv("GOMP_SPINCOUNT")) ::setenv("OMP_WAIT_POLICY", "passive", 0);
}

}  // namespace
