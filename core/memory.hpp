#pragma once
// Large buffers (volumes, label volumes, from 1 MiB): mapped from the kernel, aligned to 2 MiB and
// offered for transparent huge pages (madvise MADV_HUGEPAGE), so that first touching a 512^3
// volume costs a few hundred page faults instead of a few hundred thousand (on this project's
// virtual machine a 4 KiB page fault costs ~25 us, a 2 MiB one ~0.2 ms). Smaller requests use
// operator new. A buffer of 1-2 MiB maps 2 MiB: at most twice its size.
// On systems without transparent huge pages the advice is ignored and nothing changes.
// Freed large buffers are recycled: a block is kept and handed to the next request of the same
// length (rounded up to 2 MiB), so that work repeated on data of one shape (scoring pair after
// pair, a benchmark's iterations) takes no page faults and no kernel page clearing, both slow on
// virtual machines. The recycled blocks never take the mapped large memory past its high-water
// mark of buffers alive at once (nor the budget): a request that finds no block of its length
// first unmaps kept blocks until it fits, so the pool adds nothing to the peak. A fresh block
// reads as zero until written (new anonymous pages); a recycled one holds what its last user
// wrote: code that writes only the non-zero part of a volume uses Image(g, Zeroed{}) (volume.hpp),
// which zero-fills exactly the buffers that are not fresh.
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

constexpr size_t kLargeBufferBytes = size_t(1) << 20;  // from 1 MiB up

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

// Throws MemoryBudgetError or std::bad_alloc.
void* allocate_buffer(size_t bytes);
void free_buffer(void* p, size_t bytes) noexcept;  // bytes as given to allocate_buffer
// Whether the last allocate_buffer call of this thread returned memory that reads as zero: true
// only for a newly mapped large block (small ones come from operator new, recycled ones hold the
// last user's bytes). Read right after the call (core/volume.hpp's allocator does).
bool last_buffer_was_fresh();
// Recycled large blocks kept now (bytes mapped, not in use), and unmapping them all (the high-
// water mark restarts from the buffers alive).
uint64_t recycled_buffer_bytes();
void release_recycled_buffers();

}  // namespace pb
