#include "core/parallel.hpp"

#include <omp.h>

#include <thread>

namespace pb {

void set_threads(int n) {
  if (n <= 0) n = int(std::thread::hardware_concurrency());
  if (n <= 0) n = 1;
  omp_set_num_threads(n);
}

int thread_count() { return omp_get_max_threads(); }

}  // namespace pb
