#pragma once
// Parallel helpers. Loops use OpenMP with static schedules, so a result never depends on the
// number of threads: reductions are integer or are merged in a fixed order.
//
// Threads default to the CPUs this process may run on: its affinity mask (taskset, cpuset) capped by
// a cgroup CPU quota (v2 cpu.max, v1 cpu.cfs_quota_us / cpu.cfs_period_us, rounded up), not the
// machine's core count. OpenMP workers wait passively (OMP_WAIT_POLICY=passive, set before libgomp
// starts, see parallel.cpp) unless the user set OMP_WAIT_POLICY or GOMP_SPINCOUNT: spinning workers
// lose whole scheduler slices when another process holds a core.
#include <string>

namespace pb {

// Sets the number of worker threads for everything that follows (0 = available_cpus()). Called
// once, by the command line, before any work.
void set_threads(int n);
int thread_count();

// CPUs this process may use: affinity mask count, capped by the cgroup CPU quota; at least 1.
int available_cpus();
// The CPU limit of a cgroup quota, rounded up (0 = no quota). `proc_cgroup` is the text of
// /proc/self/cgroup, `root` the cgroup file system mount (/sys/fs/cgroup); the quota of the
// process's group and of each ancestor counts (the smallest wins). Exposed for tests.
int cgroup_cpu_limit(const std::string& proc_cgroup, const std::string& root);

}  // namespace pb
