// Thread defaults: the cgroup CPU quota read from made-up cgroup trees (v1 and v2 file formats as
// documented in the Linux kernel's Documentation/admin-guide/cgroup-v1/... and cgroup-v2.rst, from
// memory), the available CPUs against the affinity mask, and OpenMP's passive wait default.
#include <catch2/catch.hpp>
#include <sched.h>

#include <cstdlib>
#include <filesystem>
#include <regex>
#include <string>

#include "core/parallel.hpp"
#include "tests/helpers.hpp"

using namespace pb;
using pbtest::run_shell;
using pbtest::write_file;
namespace fs = std::filesystem;

TEST_CASE("cgroup CPU quota: v2 cpu.max and v1 cfs files, the smallest along the path", "[parallel]") {
  const fs::path root = fs::temp_directory_path() / "pb_test_cgroup";
  fs::remove_all(root);
  // v2: 150000 us per 100000 us = 1.5 CPUs -> 2 threads; the parent's 3 CPUs do not loosen it.
  write_file(root / "v2/app/job/cpu.max", "150000 100000\n");
  write_file(root / "v2/app/cpu.max", "300000 100000\n");
  CHECK(cgroup_cpu_limit("0::/app/job\n", (root / "v2").string()) == 2);
  // A tighter parent wins; "max" means no quota.
  write_file(root / "v2/app/cpu.max", "50000 100000\n");
  CHECK(cgroup_cpu_limit("0::/app/job\n", (root / "v2").string()) == 1);
  write_file(root / "v2/app/cpu.max", "max 100000\n");
  write_file(root / "v2/app/job/cpu.max", "max 100000\n");
  CHECK(cgroup_cpu_limit("0::/app/job\n", (root / "v2").string()) == 0);
  // v1: the cpu controller's hierarchy (here mounted as cpu,cpuacct), quota -1 = none.
  write_file(root / "v1/cpu,cpuacct/batch/cpu.cfs_quota_us", "200000\n");
  write_file(root / "v1/cpu,cpuacct/batch/cpu.cfs_period_us", "100000\n");
  const std::string v1 = "4:memory:/batch\n3:cpu,cpuacct:/batch\n0::/\n";
  CHECK(cgroup_cpu_limit(v1, (root / "v1").string()) == 2);
  write_file(root / "v1/cpu,cpuacct/batch/cpu.cfs_quota_us", "-1\n");
  CHECK(cgroup_cpu_limit(v1, (root / "v1").string()) == 0);
  // Nothing readable: no quota.
  CHECK(cgroup_cpu_limit("garbage\n", "/nonexistent") == 0);
  fs::remove_all(root);
}

TEST_CASE("available CPUs follow the affinity mask; OpenMP waits passively by default", "[parallel]") {
  cpu_set_t set;
  REQUIRE(sched_getaffinity(0, sizeof(set), &set) == 0);
  const int affinity = CPU_COUNT(&set);
  CHECK(available_cpus() >= 1);
  CHECK(available_cpus() <= affinity);
  // Restricting this thread's mask to one CPU (as `taskset -c N` does) gives one thread.
  cpu_set_t one;
  CPU_ZERO(&one);
  for (int c = 0; c < CPU_SETSIZE; ++c)
    if (CPU_ISSET(c, &set)) {
      CPU_SET(c, &one);
      break;
    }
  REQUIRE(sched_setaffinity(0, sizeof(one), &one) == 0);
  CHECK(available_cpus() == 1);
  REQUIRE(sched_setaffinity(0, sizeof(set), &set) == 0);
}

// The wait policy an OpenMP runtime reports under OMP_DISPLAY_ENV=true: GCC's libgomp prints
// "OMP_WAIT_POLICY = 'PASSIVE'" (libgomp manual), LLVM's libomp (clang builds: the sanitizer step)
// "[host] OMP_WAIT_POLICY='PASSIVE'" (LLVM OpenMP runtime documentation); "" when none is printed.
static std::string reported_wait_policy(const std::string& text) {
  std::smatch m;
  return std::regex_search(text, m, std::regex("OMP_WAIT_POLICY ?= ?'([A-Z]+)'")) ? m[1].str() : "";
}

TEST_CASE("OpenMP waits passively unless the user chose a policy", "[parallel]") {
  CHECK(reported_wait_policy("  OMP_WAIT_POLICY = 'PASSIVE'\n") == "PASSIVE");
  CHECK(reported_wait_policy("  [host] OMP_WAIT_POLICY='ACTIVE'\n") == "ACTIVE");
  const auto quiet = run_shell("env -u OMP_WAIT_POLICY -u GOMP_SPINCOUNT OMP_DISPLAY_ENV=true " + std::string(PB_CLI_PATH) + " methods");
  CHECK(reported_wait_policy(quiet.out + quiet.err) == "PASSIVE");
  const auto chosen = run_shell("env OMP_WAIT_POLICY=active OMP_DISPLAY_ENV=true " + std::string(PB_CLI_PATH) + " methods");
  CHECK(reported_wait_policy(chosen.out + chosen.err) == "ACTIVE");
}
