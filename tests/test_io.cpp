// I/O round trips for every format and voxel type; raw with header offset and big-endian data;
// spacing carried through. Expected values are the written ones (exact round trip).
#include <catch2/catch.hpp>
#include <cmath>
#include <cstring>

#include "core/error.hpp"
#include "core/io.hpp"
#include "core/sha256.hpp"
#include "tests/helpers.hpp"

using namespace pb;
using pbtest::TempDir;
namespace fs = std::filesystem;

namespace {

template <class T>
Image<T> ramp(const Geometry& g) {
  Image<T> v(g);
  for (int64_t i = 0; i < v.size(); ++i) v[i] = T((i * 37) % 200) + (std::is_floating_point<T>::value ? T(0.25) : T(0));
  return v;
}

Geometry test_geometry() {
  Geometry g;
  g.dims = {7, 5, 4};  // unequal dims catch axis mix-ups
  g.spacing_mm = {0.012, 0.013, 0.021};
  g.origin_mm = {1.5, -2.0, 0.25};
  return g;
}

template <class T>
void check_same(const AnyVolume& got, const Image<T>& want, bool check_spacing = true) {
  REQUIRE(got.type() == VoxelTraits<T>::type);
  REQUIRE(got.geometry().dims == want.geometry().dims);
  if (check_spacing)
    for (int i = 0; i < 3; ++i) CHECK(got.geometry().spacing_mm[i] == Approx(want.geometry().spacing_mm[i]).epsilon(1e-6));
  REQUIRE(std::memcmp(got.raw(), want.data(), size_t(want.size()) * sizeof(T)) == 0);
}

}  // namespace

TEMPLATE_TEST_CASE("round trip through MetaImage, NRRD and NIfTI keeps voxels and spacing", "[io]", uint8_t,
                   uint16_t, int16_t, float) {
  TempDir d;
  const auto want = ramp<TestType>(test_geometry());
  for (std::string name : {"v.mha", "v.nrrd", "v.nii", "v.nii.gz"}) {
    for (bool compress : {false, true}) {
      INFO(name << " compress=" << compress);
      write_volume(want, d / name, {compress});
      const AnyVolume got = read_volume(d / name);
      check_same(got, want);
      if (name != "v.nii" && name != "v.nii.gz")  // NIfTI keeps origin with a sign convention of its own
        for (int i = 0; i < 3; ++i) CHECK(got.geometry().origin_mm[i] == Approx(want.geometry().origin_mm[i]));
    }
  }
}

TEMPLATE_TEST_CASE("multi-page TIFF and a folder of numbered TIFF slices read as 3D", "[io]", uint8_t, uint16_t,
                   float) {
  TempDir d;
  const auto want = ramp<TestType>(test_geometry());
  write_volume(want, d / "stack.tif");
  check_same(read_volume(d / "stack.tif"), want, false);

  // Folder: slice numbers not zero-padded, so that name order and number order differ.
  fs::create_directories(d.path / "slices");
  Geometry g2 = want.geometry();
  g2.dims[2] = 1;
  for (int64_t z = 0; z < want.nz(); ++z) {
    Image<TestType> s(g2);
    std::memcpy(s.data(), want.slice(z), size_t(g2.voxels()) * sizeof(TestType));
    write_volume(s, (d.path / "slices" / ("part_" + std::to_string(z * 5) + ".tif")).string());
  }
  check_same(read_volume((d.path / "slices").string()), want, false);
}

TEST_CASE("TIFF has no reliable spacing: --spacing overrides it", "[io]") {
  TempDir d;
  const auto want = ramp<uint16_t>(test_geometry());
  write_volume(want, d / "stack.tif");
  ReadOptions o;
  o.spacing_mm = std::array<double, 3>{0.01, 0.01, 0.02};
  const AnyVolume got = read_volume(d / "stack.tif", o);
  CHECK(got.geometry().spacing_mm[2] == 0.02);
}

TEMPLATE_TEST_CASE("raw with header offset, little- and big-endian", "[io]", uint8_t, uint16_t, int16_t, float) {
  TempDir d;
  const auto want = ramp<TestType>(test_geometry());
  for (bool big : {false, true}) {
    INFO("big-endian " << big);
    write_raw(AnyVolume(want), d / "v.raw", big, 123);
    RawSpec r;
    r.dims = want.geometry().dims;
    r.type = VoxelTraits<TestType>::type;
    r.big_endian = big;
    r.header_bytes = 123;
    r.spacing_mm = want.geometry().spacing_mm;
    ReadOptions o;
    o.raw = r;
    check_same(read_volume(d / "v.raw", o), want);
  }
}

TEST_CASE("big-endian raw bytes are decoded by hand-computed value", "[io]") {
  // Two uint16 voxels 0x0102 = 258 and 0xA0B0 = 41136 stored big-endian after a 2-byte header.
  TempDir d;
  {
    std::ofstream f(d / "be.raw", std::ios::binary);
    const unsigned char bytes[] = {0xff, 0xff, 0x01, 0x02, 0xa0, 0xb0};
    f.write(reinterpret_cast<const char*>(bytes), sizeof(bytes));
  }
  ReadOptions o;
  o.raw = RawSpec{{2, 1, 1}, VoxelType::u16, true, 2, {1, 1, 1}};
  const AnyVolume v = read_volume(d / "be.raw", o);
  const auto* p = static_cast<const uint16_t*>(v.raw());
  CHECK(p[0] == 258);
  CHECK(p[1] == 41136);
}

TEST_CASE("raw files whose size does not match the geometry are rejected with the sizes", "[io]") {
  TempDir d;
  write_raw(AnyVolume(ramp<uint16_t>(test_geometry())), d / "v.raw");  // 7*5*4*2 = 280 bytes
  ReadOptions o;
  o.raw = RawSpec{{7, 5, 5}, VoxelType::u16, false, 0, {1, 1, 1}};  // wants 350
  CHECK_THROWS_WITH(read_volume(d / "v.raw", o), Catch::Contains("truncated") && Catch::Contains("350") &&
                                                     Catch::Contains("280"));
  o.raw = RawSpec{{7, 5, 3}, VoxelType::u16, false, 0, {1, 1, 1}};  // wants 210
  CHECK_THROWS_WITH(read_volume(d / "v.raw", o), Catch::Contains("larger") && Catch::Contains("210"));
}

TEST_CASE("a failed write leaves no file behind", "[io]") {
  TempDir d;
  const auto v = ramp<uint8_t>(test_geometry());
  CHECK_THROWS_AS(write_volume(v, d / "missing-folder/v.mha"), InputError);
  CHECK_THROWS_AS(write_volume(v, d / "v.xyz"), InputError);
  CHECK(fs::is_empty(d.path));
  write_volume(v, d / "v.mha");
  int files = 0;
  for (auto& e : fs::directory_iterator(d.path)) {
    ++files;
    CHECK(e.path().filename() == "v.mha");
  }
  CHECK(files == 1);  // no temporary left over
}

TEST_CASE("pair geometry check names both files and the field", "[io]") {
  Geometry a = test_geometry(), b = a;
  CHECK_NOTHROW(check_same_geometry(a, "a.mha", b, "b.mha"));
  b.dims[1] = 6;
  CHECK_THROWS_WITH(check_same_geometry(a, "a.mha", b, "b.mha"),
                    Catch::Contains("dims along y") && Catch::Contains("a.mha") && Catch::Contains("b.mha"));
  b = a;
  b.spacing_mm[2] *= 1.01;
  CHECK_THROWS_WITH(check_same_geometry(a, "a.mha", b, "b.mha"), Catch::Contains("spacing along z"));
  b = a;
  b.origin_mm[0] += a.spacing_mm[0];
  CHECK_THROWS_WITH(check_same_geometry(a, "a.mha", b, "b.mha"), Catch::Contains("origin along x"));
}

TEST_CASE("SHA-256 matches the FIPS 180-2 examples", "[io]") {
  // Source: FIPS PUB 180-2, Appendix B.1 ("abc") and B.2 (448-bit message); empty string from
  // NIST's published SHA-256 examples (value from memory, also printed by `sha256sum </dev/null`).
  CHECK(sha256_hex("abc", 3) == "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad");
  const std::string m = "abcdbcdecdefdefgefghfghighijhijkijkljklmklmnlmnomnopnopq";
  CHECK(sha256_hex(m.data(), m.size()) == "248d6a61d20638b8e5c026930c3e6039a33ce45964ff2167f6ecedd419db06c1");
  CHECK(sha256_hex("", 0) == "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855");
  // Streaming in odd pieces gives the same digest as one update.
  Sha256 s;
  for (char c : m) s.update(&c, 1);
  CHECK(s.hex() == sha256_hex(m.data(), m.size()));
}

#include "core/cv_view.hpp"

TEST_CASE("slice views are OpenCV headers over our buffer, no copy", "[io]") {
  Image<uint16_t> v(test_geometry());
  cv::Mat s = slice_mat(v, 2);
  CHECK(s.rows == 5);
  CHECK(s.cols == 7);
  CHECK(s.data == reinterpret_cast<uchar*>(v.slice(2)));
  s.at<uint16_t>(3, 4) = 999;  // row y = 3, column x = 4
  CHECK(v(4, 3, 2) == 999);
}
