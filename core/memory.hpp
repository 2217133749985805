#pragma once
// Large buffers (volumes, label volumes): mapped from the kernel, aligned to 2 MiB and offered for
// transparent huge pages (madvise MADV_HUGEPAGE), so that first touching a 512^3 volume costs a
// few hundred page faults instead of a few hundred thousand. Smaller requests use operator new.
// On systems without transparent huge pages the advice is ignored and nothing changes.
// A large buffer reads as zero until written (fresh anonymous pages): code that writes only the
// non-zero part of a volume uses Image(g, Zeroed{}), which zero-fills only small buffers.
#include <cstddef>

namespace pb {

constexpr size_t kLargeBufferBytes = size_t(4) << 20;  // from 4 MiB up

void* allocate_buffer(size_t bytes);              // throws std::bad_alloc
void free_buffer(void* p, size_t bytes) noexcept;  // bytes as given to allocate_buffer
inline bool buffer_starts_zeroed(size_t bytes) { return bytes >= kLargeBufferBytes; }

}  // namespace pb
