#pragma once
// Parallel helpers. Loops use OpenMP with static schedules, so a result never depends on the
// number of threads: reductions are integer or are merged in a fixed order.
#include <cstdint>

namespace pb {

// Sets the number of worker threads for everything that follows (0 = all cores). Called once,
// by the command line, before any work.
void set_threads(int n);
int thread_count();

}  // namespace pb
