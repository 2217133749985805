// I/O round trips for every format and voxel type; raw with header offset and big-endian data;
// spacing carried through. Expected values are the written ones (exact round trip).
#include <catch2/catch.hpp>
#include <cmath>
#include <cstring>
#include <atomic>
#include <chrono>
#include <thread>

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

// ---- hardening: our own header and size checks, non-finite voxels, memory budget, atomic outputs,
// folder lock (issue 15). Expected sizes are computed by hand from the format definitions
// (MetaIO description, Kitware; NRRD0004 definition, teem; NIfTI-1 nifti1.h): voxels x bytes.

#include <unistd.h>

#include <fstream>

#include "core/io_header.hpp"
#include "core/memory.hpp"

namespace {
void append_bytes(const std::string& path, size_t n) {
  std::ofstream f(path, std::ios::binary | std::ios::app);
  f << std::string(n, 'x');
}
}  // namespace

TEST_CASE("our header check agrees with what ITK writes, in every checked format, compressed or not", "[io][harden]") {
  TempDir d;
  const auto v = ramp<uint16_t>(test_geometry());
  for (const char* name : {"v.mha", "v.nrrd", "v.nii", "v.nii.gz"})
    for (bool compress : {false, true}) {
      const std::string path = d / name;
      write_volume(v, path, {compress});
      const VolumeHeader h = check_volume_file(path);
      CHECK(h.dims == v.geometry().dims);
      CHECK(h.type == VoxelType::u16);
      CHECK(h.expected_bytes == 7u * 5u * 4u * 2u);  // 280, by hand
      fs::remove(path);
    }
}

TEST_CASE("a MetaImage or NRRD shorter or longer than its header says is refused with both sizes", "[io][harden]") {
  TempDir d;
  const auto v = ramp<uint16_t>(test_geometry());
  for (const char* name : {"v.mha", "v.nrrd"}) {
    const std::string path = d / name;
    write_volume(v, path);
    const auto size = fs::file_size(path);
    fs::resize_file(path, size - 80);  // 200 of 280 voxel bytes left
    CHECK_THROWS_WITH(read_volume(path), Catch::Contains("truncated") && Catch::Contains("280") && Catch::Contains("200"));
    fs::resize_file(path, size);
    append_bytes(path, 9);
    CHECK_THROWS_WITH(read_volume(path), Catch::Contains("longer than its header says") && Catch::Contains("289") &&
                                             Catch::Contains("9 bytes too many"));
    // Compressed: cut the stream short.
    write_volume(v, path, {true});
    fs::resize_file(path, fs::file_size(path) - 10);
    CHECK_THROWS_AS(read_volume(path), InputError);
  }
}

TEST_CASE("absurd header values are refused at once, naming the field", "[io][harden]") {
  auto mha = [](const std::string& ndims, const std::string& dims, const std::string& spacing = "1 1 1") {
    return "ObjectType = Image\nNDims = " + ndims + "\nDimSize = " + dims + "\nElementSpacing = " + spacing +
           "\nElementType = MET_SHORT\nElementDataFile = LOCAL\n";
  };
  for (const char* nd : {"4294967296", "99999999999", "1e308", "4", "-3", ""})
    CHECK_THROWS_WITH(parse_metaimage_header(mha(nd, "2 3 4"), "x.mha"), Catch::Contains("NDims"));
  for (const char* dims : {"4294967296 1 1", "0 3 4", "-2 3 4", "2 3", "1e308 1 1"})
    CHECK_THROWS_WITH(parse_metaimage_header(mha("3", dims), "x.mha"), Catch::Contains("DimSize"));
  CHECK_THROWS_WITH(parse_metaimage_header(mha("3", "2 3 4", "nan 1 1"), "x.mha"), Catch::Contains("ElementSpacing"));
  // DimSize 2 x 3 x 4 of MET_SHORT: 24 voxels x 2 bytes = 48 bytes after the header, by hand.
  const std::string ok = mha("3", "2 3 4");
  CHECK(check_volume_bytes(ok + std::string(48, '\0'), "x.mha").expected_bytes == 48);
  CHECK_THROWS_WITH(check_volume_bytes(ok + std::string(47, '\0'), "x.mha"), Catch::Contains("truncated"));
  CHECK_THROWS_WITH(check_volume_bytes(ok + std::string(49, '\0'), "x.mha"), Catch::Contains("1 bytes too many"));
  const std::string nrrd = "NRRD0004\ntype: short\ndimension: 3\nsizes: 2 3 4\nencoding: raw\n\n";
  CHECK(check_volume_bytes(nrrd + std::string(48, '\0'), "x.nrrd").expected_bytes == 48);
  CHECK_THROWS_WITH(check_volume_bytes("NRRD0004\ntype: short\ndimension: 4294967296\n\n", "x.nrrd"),
                    Catch::Contains("dimension"));
}

TEST_CASE("non-finite voxels are counted and refused unless allowed; allowed ones read as NaN", "[io][harden]") {
  TempDir d;
  auto v = ramp<float>(test_geometry());
  v[3] = std::numeric_limits<float>::infinity();
  v[4] = -std::numeric_limits<float>::infinity();
  v[5] = std::numeric_limits<float>::quiet_NaN();
  write_volume(v, d / "v.mha");
  CHECK_THROWS_WITH(read_volume(d / "v.mha"), Catch::Contains("3 non-finite voxels (1 NaN, 1 +Inf, 1 -Inf)") &&
                                                  Catch::Contains("--allow-nonfinite"));
  ReadOptions o;
  o.allow_nonfinite = true;
  NonFinite nf;
  o.nonfinite_out = &nf;
  const AnyVolume r = read_volume(d / "v.mha", o);
  CHECK(nf.nan == 1);
  CHECK(nf.pos_inf == 1);
  CHECK(nf.neg_inf == 1);
  const float* p = static_cast<const float*>(r.raw());
  CHECK(std::isnan(p[3]));
  CHECK(std::isnan(p[4]));
  CHECK(p[6] == v[6]);
}

TEST_CASE("sizes beyond the memory budget are refused with the numbers before allocation", "[io][harden]") {
  set_memory_budget_bytes(uint64_t(64) << 20);
  CHECK_THROWS_AS(VolumeF(pbtest::cube(512)), MemoryBudgetError);  // 512^3 x 4 bytes = 512 MiB > 64 MiB
  CHECK_THROWS_WITH(VolumeF(pbtest::cube(512)), Catch::Contains("536870912 bytes") && Catch::Contains("67108864 bytes"));
  Geometry g;
  g.dims = {int64_t(1) << 40, int64_t(1) << 40, 4};  // the product overflows 64 bits
  CHECK_THROWS_AS(Mask(g), MemoryBudgetError);
  g.dims = {-5, 10, 10};
  CHECK_THROWS_WITH(Mask(g), Catch::Contains("negative"));
  const uint64_t live = large_buffer_bytes_in_use();
  {
    VolumeF a(pbtest::cube(220));  // 42.6 MB
    CHECK(large_buffer_bytes_in_use() == live + 220u * 220u * 220u * 4u);
    CHECK_THROWS_AS(VolumeF(pbtest::cube(220)), MemoryBudgetError);  // together 85 MB > 64 MiB
  }
  CHECK(large_buffer_bytes_in_use() == live);
  set_memory_budget_bytes(0);
}

TEST_CASE("atomic outputs: stale temporaries are removed, live ones kept; output folders checked", "[io][harden]") {
  TempDir d;
  fs::create_directories(d / "cells");
  const std::string stale = d / "cells/.c.partial-999999999-0.json";  // no such pid (pid_max <= 2^22)
  const std::string live = d / ("cells/.c.partial-" + std::to_string(::getpid()) + "-0.json");
  std::ofstream(stale) << "x";
  std::ofstream(live) << "x";
  CHECK(remove_stale_partials(d.path) == 1);
  CHECK_FALSE(fs::exists(stale));
  CHECK(fs::exists(live));
  write_text_atomic(d / "t.txt", "");
  CHECK(fs::file_size(d / "t.txt") == 0);
  std::ofstream(d / "file") << "x";
  CHECK_THROWS_WITH(prepare_output_folder(d / "file"), Catch::Contains("existing file"));
  prepare_output_folder(d / "new/nested");
  CHECK(fs::is_directory(d / "new/nested"));
}

TEST_CASE("one run per folder: a second lock names the holder", "[io][harden]") {
  TempDir d;
  {
    FolderLock first(d / "run", "run suites/quick.toml");
    // flock locks belong to open file descriptions: a second open conflicts even in one process.
    CHECK_THROWS_WITH(FolderLock(d / "run", "run other.toml"),
                      Catch::Contains("in use") && Catch::Contains("pid " + std::to_string(::getpid())) &&
                          Catch::Contains("run suites/quick.toml"));
  }
  FolderLock again(d / "run", "report");  // released with the first
}

TEST_CASE("declared shards share a folder; the same shard twice, or a whole run beside them, is refused", "[io][harden]") {
  TempDir d;
  const std::string dir = d / "run";
  {
    FolderLock one(dir, "run q.toml --shard 1/3", 0, 3);
    FolderLock two(dir, "run q.toml --shard 2/3", 1, 3);  // side by side
    CHECK_THROWS_WITH(FolderLock(dir, "run q.toml --shard 2/3", 1, 3),
                      Catch::Contains("shard 2/3") && Catch::Contains("already running") && Catch::Contains("--shard 2/3"));
    CHECK_THROWS_WITH(FolderLock(dir, "report"), Catch::Contains("in use by another porebench process"));
    CHECK_FALSE(two.try_exclusive());  // shard 1 still holds the folder
  }
  {
    FolderLock whole(dir, "run q.toml");
    CHECK_THROWS_WITH(FolderLock(dir, "run q.toml --shard 1/3", 0, 3), Catch::Contains("not a shard of this run"));
  }
  FolderLock last(dir, "run q.toml --shard 3/3", 2, 3);
  CHECK(last.try_exclusive());  // alone: it may write the reports
  CHECK_THROWS(FolderLock(dir, "run q.toml --shard 1/3", 0, 3));
}

TEST_CASE("a wait lock makes a second holder wait until the first lets go", "[io][harden]") {
  TempDir d;
  const std::string path = d / "prepare.lock";
  std::atomic<int> order{0};
  int first_done = -1, second_got = -1;
  std::thread t;
  {
    WaitLock first(path);
    t = std::thread([&] {
      WaitLock second(path);
      second_got = order++;
    });
    std::this_thread::sleep_for(std::chrono::milliseconds(100));
    first_done = order++;
  }
  t.join();
  CHECK(first_done == 0);
  CHECK(second_got == 1);
}
