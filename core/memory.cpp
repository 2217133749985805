// Large buffers come from mmap (fresh anonymous pages read as zero), aligned to 2 MiB and advised
// for transparent huge pages, and are recycled when freed (see memory.hpp).
#include "core/memory.hpp"

#include <sys/mman.h>

#include <algorithm>
#include <atomic>
#include <cstdint>
#include <cstdlib>
#include <fstream>
#include <mutex>
#include <new>
#include <sstream>
#include <vector>

namespace pb {

namespace {
constexpr size_t kHugePage = size_t(2) << 20;
size_t rounded(size_t bytes) { return (bytes + kHugePage - 1) / kHugePage * kHugePage; }

std::atomic<uint64_t> g_live{0};
std::atomic<uint64_t> g_budget_override{0};
thread_local bool t_last_fresh = false;

// The recycled blocks (mapped length, address) and the mapped lengths: in use (live_len) and at
// most in use at once so far (peak_len). Kept blocks stay within peak_len - live_len.
struct Pool {
  std::mutex m;
  std::vector<std::pair<size_t, void*>> kept;
  uint64_t kept_len = 0, live_len = 0, peak_len = 0;
};
Pool& pool() {
  static Pool* p = new Pool;  // never destroyed: buffers may be freed during static destruction
  return *p;
}

uint64_t machine_memory_bytes() {
  uint64_t total = 0;
  std::ifstream mi("/proc/meminfo");
  std::string key;
  uint64_t kb = 0;
  std::string unit;
  while (mi >> key >> kb >> unit)
    if (key == "MemTotal:") {
      total = kb * 1024;
      break;
    }
  // A container's limit (cgroup v2, then v1) when it is lower.
  for (const char* f : {"/sys/fs/cgroup/memory.max", "/sys/fs/cgroup/memory/memory.limit_in_bytes"}) {
    std::ifstream c(f);
    uint64_t lim = 0;
    if (c >> lim && lim > 0 && (total == 0 || lim < total)) total = lim;
  }
  return total > 0 ? total : uint64_t(8) << 30;  // unknown: 8 GiB (invented, conservative)
}

uint64_t default_budget() {
  static const uint64_t b = [] {
    if (const char* e = std::getenv("PB_MEMORY_BUDGET_MB")) {
      char* end = nullptr;
      const unsigned long long mb = std::strtoull(e, &end, 10);
      if (end != e && *end == '\0' && mb > 0) return uint64_t(mb) << 20;
    }
    return machine_memory_bytes();
  }();
  return b;
}

std::string mib(uint64_t bytes) {
  std::ostringstream s;
  s.precision(bytes >= (uint64_t(10) << 20) ? 0 : 2);
  s << std::fixed << double(bytes) / double(1 << 20) << " MiB";
  return s.str();
}
}  // namespace

uint64_t memory_budget_bytes() {
  const uint64_t o = g_budget_override.load();
  return o ? o : default_budget();
}
void set_memory_budget_bytes(uint64_t bytes) { g_budget_override = bytes; }
uint64_t large_buffer_bytes_in_use() { return g_live.load(); }

uint64_t saturating_product(std::initializer_list<uint64_t> factors) {
  uint64_t p = 1;
  for (uint64_t f : factors) {
    if (f != 0 && p > UINT64_MAX / f) return UINT64_MAX;
    p *= f;
  }
  return p;
}

void check_memory(uint64_t bytes, const std::string& what, bool with_live) {
  const uint64_t budget = memory_budget_bytes();
  const uint64_t live = with_live ? g_live.load() : 0;
  if (bytes <= budget && live <= budget - bytes) return;
  std::ostringstream s;
  s << what << " needs ";
  if (bytes == UINT64_MAX)
    s << "more than 2^64 bytes";
  else
    s << bytes << " bytes (" << mib(bytes) << ")";
  if (live) s << " on top of " << live << " bytes (" << mib(live) << ") in use";
  s << " but the memory budget is " << budget << " bytes (" << mib(budget)
    << "; the machine's memory, or PB_MEMORY_BUDGET_MB)";
  throw MemoryBudgetError(s.str());
}

bool last_buffer_was_fresh() { return t_last_fresh; }

void* allocate_buffer(size_t bytes) {
  t_last_fresh = false;
  if (bytes < kLargeBufferBytes) return ::operator new(bytes);
  check_memory(bytes, "a buffer", true);
  const size_t len = rounded(bytes);
  Pool& P = pool();
  std::vector<std::pair<size_t, void*>> drop;  // unmapped outside the lock
  {
    std::lock_guard<std::mutex> lock(P.m);
    for (size_t i = P.kept.size(); i-- > 0;)
      if (P.kept[i].first == len) {  // the most recently kept block of this length
        void* p = P.kept[i].second;
        P.kept.erase(P.kept.begin() + std::ptrdiff_t(i));
        P.kept_len -= len, P.live_len += len;
        g_live += bytes;
        return p;
      }
    // A new block: kept ones go (oldest first) until the mapped total stays within the high-water
    // mark (or this request alone) and the budget.
    const uint64_t cap = std::min<uint64_t>(std::max<uint64_t>(P.peak_len, P.live_len + len), memory_budget_bytes());
    while (!P.kept.empty() && P.live_len + P.kept_len + len > cap) {
      drop.push_back(P.kept.front());
      P.kept_len -= P.kept.front().first;
      P.kept.erase(P.kept.begin());
    }
    P.live_len += len;  // counted now, so that other threads' requests meanwhile see it
    P.peak_len = std::max(P.peak_len, P.live_len + P.kept_len);
  }
  for (const auto& [l, p] : drop) munmap(p, l);
  // Map one huge page more than needed, then unmap the misaligned head and the tail.
  void* raw = mmap(nullptr, len + kHugePage, PROT_READ | PROT_WRITE, MAP_PRIVATE | MAP_ANONYMOUS, -1, 0);
  if (raw == MAP_FAILED) {
    std::lock_guard<std::mutex> lock(P.m);
    P.live_len -= len;
    throw std::bad_alloc();
  }
  const uintptr_t base = reinterpret_cast<uintptr_t>(raw);
  const uintptr_t aligned = (base + kHugePage - 1) / kHugePage * kHugePage;
  if (aligned > base) munmap(raw, aligned - base);
  const uintptr_t end = base + len + kHugePage;
  if (end > aligned + len) munmap(reinterpret_cast<void*>(aligned + len), end - (aligned + len));
  void* p = reinterpret_cast<void*>(aligned);
#ifdef MADV_HUGEPAGE
  madvise(p, len, MADV_HUGEPAGE);  // advice only: where refused, normal pages are used
#endif
  g_live += bytes;
  t_last_fresh = true;
  return p;
}

void free_buffer(void* p, size_t bytes) noexcept {
  if (!p) return;
  if (bytes < kLargeBufferBytes) {
    ::operator delete(p);
    return;
  }
  const size_t len = rounded(bytes);
  g_live -= bytes;
  Pool& P = pool();
  std::lock_guard<std::mutex> lock(P.m);
  P.live_len -= len;
  try {
    P.kept.emplace_back(len, p);  // live + kept is unchanged: within the high-water mark
    P.kept_len += len;
  } catch (...) {  // no memory for the list entry: unmap instead
    munmap(p, len);
  }
}

uint64_t recycled_buffer_bytes() {
  Pool& P = pool();
  std::lock_guard<std::mutex> lock(P.m);
  return P.kept_len;
}

void release_recycled_buffers() {
  Pool& P = pool();
  std::vector<std::pair<size_t, void*>> drop;
  {
    std::lock_guard<std::mutex> lock(P.m);
    drop.swap(P.kept);
    P.kept_len = 0;
    P.peak_len = P.live_len;
  }
  for (const auto& [l, p] : drop) munmap(p, l);
}

}  // namespace pb
