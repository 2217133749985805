#pragma once
// The volume type: one contiguous buffer, x fastest, then y, then z; geometry in millimetres.
// Image<T> owns its voxels (RAII, std::vector); AnyVolume holds one of the supported stored voxel
// types (uint8, uint16, int16, float32). Methods work on Image<float>; masks are Image<uint8_t>.
#include <algorithm>
#include <array>
#include <cstdint>
#include <memory>
#include <new>
#include <string>
#include <type_traits>
#include <utility>
#include <variant>
#include <vector>

#include "core/memory.hpp"

namespace pb {

struct Geometry {
  std::array<int64_t, 3> dims{0, 0, 0};        // voxels along x, y, z
  std::array<double, 3> spacing_mm{1, 1, 1};   // voxel size along x, y, z
  std::array<double, 3> origin_mm{0, 0, 0};    // centre of voxel (0,0,0)

  int64_t voxels() const { return dims[0] * dims[1] * dims[2]; }
  int64_t slice_voxels() const { return dims[0] * dims[1]; }
  double voxel_volume_mm3() const { return spacing_mm[0] * spacing_mm[1] * spacing_mm[2]; }
  bool same_dims(const Geometry& o) const { return dims == o.dims; }
};

// Voxel count of g, checked: every dim >= 0, no overflow, and dims x elem_bytes within the memory
// budget (core/memory.hpp); throws InputError (MemoryBudgetError) with the numbers otherwise.
size_t checked_voxels(const Geometry& g, size_t elem_bytes);

// Describes a geometry for messages: "96 x 96 x 96 voxels, spacing 0.01 x 0.01 x 0.01 mm".
std::string describe(const Geometry& g);

// Throws InputError naming both files and the first mismatching field (dims, spacing, origin).
// Spacing and origin may differ by rel_tol relative to the spacing.
void check_same_geometry(const Geometry& a, const std::string& name_a, const Geometry& b,
                         const std::string& name_b, double rel_tol = 1e-4);

enum class VoxelType { u8, u16, i16, f32 };
const char* voxel_type_name(VoxelType t);            // "uint8", "uint16", "int16", "float32"
VoxelType parse_voxel_type(const std::string& name);  // throws InputError listing supported types
int voxel_type_bytes(VoxelType t);

template <class T> struct VoxelTraits;
template <> struct VoxelTraits<uint8_t> { static constexpr VoxelType type = VoxelType::u8; };
template <> struct VoxelTraits<uint16_t> { static constexpr VoxelType type = VoxelType::u16; };
template <> struct VoxelTraits<int16_t> { static constexpr VoxelType type = VoxelType::i16; };
template <> struct VoxelTraits<float> { static constexpr VoxelType type = VoxelType::f32; };

// An allocator that leaves new elements of trivial types uninitialised unless a value is given,
// so that a large buffer can be first written (and its pages first touched) by the threads that
// fill it, instead of a serial zero-fill. Large buffers get huge pages (core/memory.hpp).
template <class T>
struct DefaultInitAllocator : std::allocator<T> {
  template <class U> struct rebind { using other = DefaultInitAllocator<U>; };
  DefaultInitAllocator() = default;
  template <class U> DefaultInitAllocator(const DefaultInitAllocator<U>&) noexcept {}
  T* allocate(size_t n) {
    if (n > size_t(-1) / sizeof(T)) throw std::bad_alloc();
    return static_cast<T*>(allocate_buffer(n * sizeof(T)));
  }
  void deallocate(T* p, size_t n) noexcept { free_buffer(p, n * sizeof(T)); }
  template <class U> void construct(U* p) noexcept(std::is_nothrow_default_constructible<U>::value) {
    ::new (static_cast<void*>(p)) U;
  }
  template <class U, class... A> void construct(U* p, A&&... args) {
    ::new (static_cast<void*>(p)) U(std::forward<A>(args)...);
  }
};

// A buffer whose trivial elements are left uninitialised, and one that reads as zero: a freshly
// mapped large one comes zeroed from the kernel (core/memory.hpp), so its pages are only touched
// where written; small and recycled ones are zero-filled.
template <class T>
using Buffer = std::vector<T, DefaultInitAllocator<T>>;
template <class T>
Buffer<T> zeroed_buffer(size_t n) {
  static_assert(std::is_trivial<T>::value, "zeroed_buffer needs a trivial type");
  Buffer<T> b;
  if (n == 0) return b;
  b.reserve(n);  // the one allocation, on this thread
  const bool fresh = last_buffer_was_fresh();
  b.resize(n);  // default-initialised: nothing written
  if (!fresh) std::fill(b.begin(), b.end(), T{});
  return b;
}

struct Uninitialized {};  // tag: Image(g, Uninitialized{}) leaves the voxels unset
struct Zeroed {};         // tag: Image(g, Zeroed{}) is all zero, touching memory only when not fresh (zeroed_buffer)

template <class T>
class Image {
 public:
  using value_type = T;
  using Buffer = pb::Buffer<T>;
  Image() = default;
  explicit Image(const Geometry& g, T fill = T{}) : geo_(g), data_(checked_voxels(g, sizeof(T)), fill) {}
  // Every voxel must be written before it is read.
  Image(const Geometry& g, Uninitialized) : geo_(g), data_(checked_voxels(g, sizeof(T))) {}
  Image(const Geometry& g, Zeroed) : geo_(g), data_(zeroed_buffer<T>(checked_voxels(g, sizeof(T)))) {}

  const Geometry& geometry() const { return geo_; }
  void set_geometry_keep_dims(const Geometry& g) {  // spacing/origin only
    geo_.spacing_mm = g.spacing_mm;
    geo_.origin_mm = g.origin_mm;
  }
  int64_t nx() const { return geo_.dims[0]; }
  int64_t ny() const { return geo_.dims[1]; }
  int64_t nz() const { return geo_.dims[2]; }
  int64_t size() const { return int64_t(data_.size()); }
  bool empty() const { return data_.empty(); }

  T* data() { return data_.data(); }
  const T* data() const { return data_.data(); }
  T* slice(int64_t z) { return data_.data() + z * geo_.slice_voxels(); }
  const T* slice(int64_t z) const { return data_.data() + z * geo_.slice_voxels(); }
  int64_t index(int64_t x, int64_t y, int64_t z) const { return (z * geo_.dims[1] + y) * geo_.dims[0] + x; }
  T& operator()(int64_t x, int64_t y, int64_t z) { return data_[size_t(index(x, y, z))]; }
  const T& operator()(int64_t x, int64_t y, int64_t z) const { return data_[size_t(index(x, y, z))]; }
  T& operator[](int64_t i) { return data_[size_t(i)]; }
  const T& operator[](int64_t i) const { return data_[size_t(i)]; }
  Buffer& buffer() { return data_; }
  const Buffer& buffer() const { return data_; }

 private:
  Geometry geo_;
  Buffer data_;
};

using VolumeF = Image<float>;
using Mask = Image<uint8_t>;  // 0 = no, non-zero = yes

// A volume of any supported stored voxel type.
class AnyVolume {
 public:
  using Storage = std::variant<Image<uint8_t>, Image<uint16_t>, Image<int16_t>, Image<float>>;
  AnyVolume() = default;
  template <class T> AnyVolume(Image<T> img) : v_(std::move(img)) {}

  VoxelType type() const;
  const Geometry& geometry() const;
  void set_spacing(const std::array<double, 3>& spacing_mm);
  const void* raw() const;
  void* raw();
  size_t bytes() const;
  // Converts to float32 (a copy; a float volume is copied too). NaN voxels are kept.
  VolumeF to_float() const;
  // Interprets as a mask: voxel != 0, or voxel == label when label >= 0.
  Mask to_mask(int64_t label = -1) const;
  template <class F> decltype(auto) visit(F&& f) const { return std::visit(std::forward<F>(f), v_); }
  template <class F> decltype(auto) visit(F&& f) { return std::visit(std::forward<F>(f), v_); }

 private:
  Storage v_;
};

}  // namespace pb
