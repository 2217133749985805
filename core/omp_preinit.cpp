// OpenMP waits passively by default in porebench's executables. Linked into executables only
// (CMakeLists.txt: an interface source of porebench_lib for targets of type EXECUTABLE), because a
// shared library (libporebench.so, the Python module) may not carry a .preinit_array.
#include <cstdlib>

namespace {

// OpenMP's wait policy must be in the environment when libgomp initialises, which happens before
// any of our code runs. A function in the executable's .preinit_array runs before every shared
// library's initialiser (ELF gABI; this file is linked into each executable), so it sets
// OMP_WAIT_POLICY=passive there unless the user chose OMP_WAIT_POLICY or GOMP_SPINCOUNT. Passive:
// a worker that finds no work sleeps on a futex at once instead of spinning (libgomp's default
// spins ~300k iterations), which on a shared machine otherwise burns the slices the other threads
// of the same team need; measured in bench/README.md (threads rows).
void omp_passive_by_default(int, char**, char**) {
  if (!std::getenv("OMP_WAIT_POLICY") && !std::getenv("GOMP_SPINCOUNT")) ::setenv("OMP_WAIT_POLICY", "passive", 0);
}
__attribute__((section(".preinit_array"), used)) void (*const g_omp_passive)(int, char**, char**) = omp_passive_by_default;

}  // namespace
