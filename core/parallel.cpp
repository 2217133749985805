// Thread count (core/parallel.hpp): the CPUs this process may use (affinity mask, cgroup v1/v2 CPU
// quota), and set_threads for OpenMP.
#include "core/parallel.hpp"

#include <omp.h>
#include <sched.h>

#include <cmath>
#include <cstdlib>
#include <fstream>
#include <sstream>
#include <thread>
#include <vector>

namespace pb {
namespace {

std::string read_small(const std::string& path) {
  std::ifstream f(path);
  std::stringstream ss;
  if (f) ss << f.rdbuf();
  return ss.str();
}

// The CPU limit of one cgroup directory (0 = none or unreadable).
int limit_of(const std::string& dir, bool v2) {
  double quota = -1, period = 0;
  if (v2) {  // cpu.max: "max 100000" or "150000 100000"
    std::istringstream in(read_small(dir + "/cpu.max"));
    std::string q;
    if (!(in >> q >> period) || q == "max") return 0;
    quota = std::atof(q.c_str());
  } else {
    std::istringstream q(read_small(dir + "/cpu.cfs_quota_us")), p(read_small(dir + "/cpu.cfs_period_us"));
    if (!(q >> quota) || !(p >> period)) return 0;
  }
  if (quota <= 0 || period <= 0) return 0;
  return std::max(1, int(std::ceil(quota / period - 1e-9)));
}

}  // namespace

int cgroup_cpu_limit(const std::string& proc_cgroup, const std::string& root) {
  int best = 0;
  auto take = [&](int l) {
    if (l > 0 && (best == 0 || l < best)) best = l;
  };
  std::istringstream lines(proc_cgroup);
  for (std::string line; std::getline(lines, line);) {
    // "hierarchy-id:controllers:path"; v2 is "0::path", v1 lists controllers such as "cpu,cpuacct".
    const size_t a = line.find(':'), b = a == std::string::npos ? a : line.find(':', a + 1);
    if (b == std::string::npos) continue;
    const std::string ctl = line.substr(a + 1, b - a - 1);
    std::string path = line.substr(b + 1);
    std::vector<std::string> mounts;
    bool v2 = false;
    if (line.compare(0, a, "0") == 0 && ctl.empty()) {
      v2 = true;
      mounts = {root, root + "/unified"};
    } else {
      bool cpu = false;
      std::istringstream cs(ctl);
      for (std::string c; std::getline(cs, c, ',');) cpu = cpu || c == "cpu";
      if (!cpu) continue;
      mounts = {root + "/" + ctl, root + "/cpu", root + "/cpu,cpuacct", root + "/cpuacct,cpu"};
    }
    // The group and its ancestors (in a cgroup namespace the path may be "/" even when limited).
    for (const auto& m : mounts)
      for (std::string p = path;;) {
        take(limit_of(m + (p == "/" ? "" : p), v2));
        if (p.empty() || p == "/") break;
        const size_t s = p.find_last_of('/');
        p = s == 0 || s == std::string::npos ? "/" : p.substr(0, s);
      }
  }
  return best;
}

int available_cpus() {
  int n = 0;
  cpu_set_t set;
  if (sched_getaffinity(0, sizeof(set), &set) == 0) n = CPU_COUNT(&set);
  if (n <= 0) n = int(std::thread::hardware_concurrency());
  const int quota = cgroup_cpu_limit(read_small("/proc/self/cgroup"), "/sys/fs/cgroup");
  if (quota > 0 && quota < n) n = quota;
  return n > 0 ? n : 1;
}

void set_threads(int n) {
  if (n <= 0) n = available_cpus();
  omp_set_num_threads(n);
}

int thread_count() { return omp_get_max_threads(); }

}  // namespace pb
