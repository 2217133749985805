#pragma once
// Large buffers (volumes, label volumes): mapped from the kernel, aligned to 2 MiB and offered for
// transparent huge pages (madvise MADV_HUGEPAGE), so that first touching a 512^3 volume costs a
// few hundred page faults instead of a few hundred thousand. Smaller requests use operator new.
// On systems without transparent huge pages the advice is ignored and nothing changes.
// A large buffer reads as zero until written (fresh anonymous pages): code that writes only the
// non-zero part of a volume uses Image(g, Zeroed{}), which zero-fills only small buffers.
//
// Memory budget: every size that comes from input (dims x voxel size, projections x bins, phantom
// size) is checked with check_memory() before it is allocated, so that an impossible request is
// exit 2 with the numbers instead of an abort or an out-of-memory kill. The budget is the
// machine's memory (MemTotal, or the cgroup limit when lower), or PB_MEMORY_BUDGET_MB when set.
// As a last guard, allocate_buffer() refuses a large buffer that would take the large buffers
// alive past the budget (MemoryBudgetError, exit 2).
#include <cstddef>
#include <cstdint>
#include <initializer_list>
#include <string>

#include "core/error.hpp"

namespace pb {

constexpr size_t kLargeBufferBytes = size_t(4) << 20;  // from 4 MiB up

// Bad input that asks for more memory than the budget: exit 2 like any InputError.
struct MemoryBudgetError : InputError {
  using InputError::InputError;
};

uint64_t memory_budget_bytes();
void set_memory_budget_bytes(uint64_t bytes);  // 0: back to the default (tests)
uint64_t large_buffer_bytes_in_use();
// Throws MemoryBudgetError "<what> needs N bytes (X MiB) but the memory budget is M bytes (Y MiB)"
// when `bytes` (plus the large buffers alive, when `with_live`) exceeds the budget.
void check_memory(uint64_t bytes, const std::string& what, bool with_live = false);
// a * b * ... with overflow reported as UINT64_MAX (so that it fails any budget check).
uint64_t saturating_product(std::initializer_list<uint64_t> factors);

void* allocate_buffer(size_t bytes);              // throws MemoryBudgetError or std::bad_alloc
void free_buffer(void* p, size_t bytes) noexcept;  // bytes as given to allocate_buffer
inline bool buffer_starts_zeroed(size_t bytes) { return bytes >= kLargeBufferBytes; }

}  // namespace pb
