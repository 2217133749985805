// Large buffers come straight from mmap (fresh anonymous pages read as zero, see
// large_buffers_are_zeroed), aligned to 2 MiB and advised for transparent huge pages.
#include "core/memory.hpp"

#include <sys/mman.h>

#include <cstdint>
#include <new>

namespace pb {

namespace {
constexpr size_t kHugePage = size_t(2) << 20;
size_t rounded(size_t bytes) { return (bytes + kHugePage - 1) / kHugePage * kHugePage; }
}  // namespace

void* allocate_buffer(size_t bytes) {
  if (bytes < kLargeBufferBytes) return ::operator new(bytes);
  const size_t len = rounded(bytes);
  // Map one huge page more than needed, then unmap the misaligned head and the tail.
  void* raw = mmap(nullptr, len + kHugePage, PROT_READ | PROT_WRITE, MAP_PRIVATE | MAP_ANONYMOUS, -1, 0);
  if (raw == MAP_FAILED) throw std::bad_alloc();
  const uintptr_t base = reinterpret_cast<uintptr_t>(raw);
  const uintptr_t aligned = (base + kHugePage - 1) / kHugePage * kHugePage;
  if (aligned > base) munmap(raw, aligned - base);
  const uintptr_t end = base + len + kHugePage;
  if (end > aligned + len) munmap(reinterpret_cast<void*>(aligned + len), end - (aligned + len));
  void* p = reinterpret_cast<void*>(aligned);
#ifdef MADV_HUGEPAGE
  madvise(p, len, MADV_HUGEPAGE);  // advice only: where refused, normal pages are used
#endif
  return p;
}

void free_buffer(void* p, size_t bytes) noexcept {
  if (!p) return;
  if (bytes < kLargeBufferBytes)
    ::operator delete(p);
  else
    munmap(p, rounded(bytes));
}

}  // namespace pb
