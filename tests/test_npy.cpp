// .npy input and output (core/npy.cpp) against numpy itself: files written by
// numpy.lib.format.write_array in every dtype porebench reads, C and Fortran order, little and big
// endian, format versions 1.0/2.0/3.0 are read to the exact values; files porebench writes are
// np.load-ed and compared exactly (tests/ref/npy_numpy.py, Debian python3-numpy). Bad files are
// InputErrors naming the file and the field before any allocation.
#include <catch2/catch.hpp>

#include <cmath>
#include <functional>
#include <numeric>
#include <tuple>

#include "core/error.hpp"
#include "core/json.hpp"
#include "core/npy.hpp"
#include "tests/helpers.hpp"

using namespace pb;
using pbtest::read_text;
using pbtest::write_file;
namespace fs = std::filesystem;

namespace {

// The formula of tests/ref/npy_numpy.py value(): element [z, y, x].
double expected(const std::string& dtype, int64_t x, int64_t y, int64_t z) {
  const int64_t k = x + 10 * y + 100 * z;
  if (dtype == "u1") return double((k * 7 + 3) % 256);
  if (dtype == "b1") return double((x + y + z) % 2);
  if (dtype == "u2") return double(k * 61 + 300);
  if (dtype == "i2") return double(-(k * 37) + 5);
  return double(float(k * 0.5 - 3.25));
}

VoxelType type_of(const std::string& dtype) {
  if (dtype == "u1" || dtype == "b1") return VoxelType::u8;
  if (dtype == "u2") return VoxelType::u16;
  if (dtype == "i2") return VoxelType::i16;
  return VoxelType::f32;
}

// A volume of `dtype`'s voxel type holding expected() at every voxel.
AnyVolume expected_volume(const std::string& dtype, const Geometry& g) {
  AnyVolume v;
  switch (type_of(dtype)) {
    case VoxelType::u8: v = AnyVolume(Image<uint8_t>(g)); break;
    case VoxelType::u16: v = AnyVolume(Image<uint16_t>(g)); break;
    case VoxelType::i16: v = AnyVolume(Image<int16_t>(g)); break;
    case VoxelType::f32: v = AnyVolume(Image<float>(g)); break;
  }
  v.visit([&](auto& img) {
    using T = typename std::decay_t<decltype(img)>::value_type;
    for (int64_t z = 0; z < g.dims[2]; ++z)
      for (int64_t y = 0; y < g.dims[1]; ++y)
        for (int64_t x = 0; x < g.dims[0]; ++x) img(x, y, z) = T(expected(dtype, x, y, z));
  });
  return v;
}

double at(const AnyVolume& v, int64_t i) {
  return v.visit([&](const auto& img) { return double(img[i]); });
}

// A version 1.0 header for `dict` (padded to 64 bytes like numpy).
std::string v1(std::string dict) {
  while ((10 + dict.size() + 1) % 64) dict += ' ';
  dict += '\n';
  std::string h("\x93NUMPY\x01\x00", 8);
  h += char(dict.size() & 0xff);
  h += char(dict.size() >> 8);
  return h + dict;
}

}  // namespace

TEST_CASE("npy: numpy's files in every dtype, order, endianness and version read exactly", "[npy]") {
  pbtest::TempDir d;
  const auto w = pbtest::run_ref_script("npy_numpy.py", "write " + d / "np");
  INFO(w.out << w.err);
  REQUIRE(w.exit_code == 0);
  int files = 0;
  for (const auto& e : fs::directory_iterator(d.path / "np")) {
    const std::string name = e.path().filename().string();
    const std::string dtype = name.substr(0, 2);
    INFO(name);
    const AnyVolume v = read_volume(e.path().string());
    CHECK(v.type() == type_of(dtype));
    const bool two_d = name.find("_2d_") != std::string::npos;
    const Geometry& g = v.geometry();
    CHECK(g.dims == std::array<int64_t, 3>{3, 4, two_d ? 1 : 5});
    CHECK(g.spacing_mm == std::array<double, 3>{1, 1, 1});  // .npy stores none
    int64_t wrong = 0;
    for (int64_t z = 0; z < g.dims[2]; ++z)
      for (int64_t y = 0; y < g.dims[1]; ++y)
        for (int64_t x = 0; x < g.dims[0]; ++x)
          wrong += at(v, (z * g.dims[1] + y) * g.dims[0] + x) != expected(dtype, x, y, z);
    CHECK(wrong == 0);
    ++files;
  }
  // numpy.lib.format: 5 dtypes; u2/i2/f4 in 2 byte orders; 2 shapes; 2 orders; 3 versions; + np.save
  CHECK(files == (2 * 1 + 3 * 2) * 2 * 2 * 3 + 1);
}

namespace {

// The formula of tests/ref/npy_numpy.py value_flat(): element i in C order.
float expected_flat(const std::string& dtype, int64_t i) {
  if (dtype == "u1") return float((i * 7 + 3) % 256);
  if (dtype == "u2") return float(i * 61 + 300);
  if (dtype == "i2") return float(-(i * 37) + 5);
  if (dtype == "f8") return float(double(i) * 0.1 + 1.0 / 3.0);  // numpy's float64, rounded to float32
  return float(double(i) * 0.5 - 3.25);
}

}  // namespace

TEST_CASE("npy arrays of any shape: numpy's files read as float32, ours np.load to the same values", "[npy]") {
  // Source: numpy.save / numpy.load (tests/ref/npy_numpy.py arrays, check_array), Debian python3-numpy.
  pbtest::TempDir d;
  const auto w = pbtest::run_ref_script("npy_numpy.py", "arrays " + d / "np");
  REQUIRE(w.exit_code == 0);
  const std::vector<std::pair<std::string, std::vector<int64_t>>> shapes = {
      {"2x3x4x5", {2, 3, 4, 5}}, {"7", {7}}, {"3x1x2", {3, 1, 2}}};
  for (const auto& [dtype, endian] : std::vector<std::pair<std::string, std::string>>{
           {"u1", "na"}, {"u2", "be"}, {"i2", "le"}, {"f4", "le"}, {"f4", "be"}, {"f8", "le"}})
    for (const auto& [text, shape] : shapes) {
      const std::string name = "arr_" + dtype + "_" + endian + "_" + text + ".npy";
      INFO(name);
      const NpyArray a = read_npy_array(d / ("np/" + name));
      CHECK(a.shape == shape);
      bool same = a.data.size() == size_t(std::accumulate(shape.begin(), shape.end(), int64_t(1), std::multiplies<>()));
      for (size_t i = 0; same && i < a.data.size(); ++i) same = a.data[i] == expected_flat(dtype, int64_t(i));
      CHECK(same);
    }
  const NpyArray empty = read_npy_array(d / "np/arr_empty.npy");
  CHECK(empty.shape == std::vector<int64_t>{0, 3, 4});
  CHECK(empty.data.empty());
  CHECK_THROWS_WITH(read_npy_array(d / "np/arr_fortran.npy"), Catch::Contains("arr_fortran.npy") && Catch::Contains("fortran_order"));
  // A truncated array is refused naming the file and the sizes.
  const std::string good = read_text(d / "np/arr_f4_le_2x3x4x5.npy");
  write_file(d / "short.npy", good.substr(0, good.size() - 4));
  CHECK_THROWS_WITH(read_npy_array(d / "short.npy"), Catch::Contains("short.npy") && Catch::Contains("is truncated"));
  // Ours: float32 and uint8 of several shapes, loaded by numpy.
  for (const auto& [text, shape] : shapes) {
    const int64_t n = std::accumulate(shape.begin(), shape.end(), int64_t(1), std::multiplies<>());
    std::vector<float> f(static_cast<size_t>(n));
    std::vector<uint8_t> u(static_cast<size_t>(n));
    for (int64_t i = 0; i < n; ++i) f[size_t(i)] = expected_flat("f4", i), u[size_t(i)] = uint8_t(expected_flat("u1", i));
    std::string dims;
    for (int64_t s : shape) dims += " " + std::to_string(s);
    for (const auto& [dtype, data, type] : {std::tuple<std::string, const void*, VoxelType>{"f4", f.data(), VoxelType::f32},
                                           {"u1", u.data(), VoxelType::u8}}) {
      const std::string path = d / ("ours_" + dtype + "_" + text + ".npy");
      write_npy_array(data, type, shape, path);
      const auto r = pbtest::run_ref_script("npy_numpy.py", "check_array " + path + " " + dtype + dims);
      INFO(path << ": " << r.out << r.err);
      CHECK(r.out == "ok\n");
      CHECK(read_npy_array(path).shape == shape);
    }
  }
}

TEST_CASE("npy: porebench's files np.load to the same values (C order, z y x)", "[npy]") {
  pbtest::TempDir d;
  for (const std::string dtype : {"u1", "u2", "i2", "f4"}) {
    Geometry g;
    g.dims = {3, 4, 5};
    g.spacing_mm = {0.05, 0.05, 0.05};
    const AnyVolume v = expected_volume(dtype, g);
    const std::string path = d / (dtype + ".npy");
    write_volume(v, path);
    const std::string bytes = read_text(path);
    // numpy.lib.format: the voxels start on a multiple of 64 bytes; header ends with '\n'
    CHECK(bytes.size() == 128 + size_t(v.bytes()));
    CHECK(bytes[127] == '\n');
    const auto r = pbtest::run_ref_script("npy_numpy.py", "check " + path + " " + dtype + " 5 4 3");
    INFO(dtype << ": " << r.out << r.err);
    CHECK(r.exit_code == 0);
    CHECK(r.out == "ok\n");
    // and back: the same voxels, spacing 1 mm unless given
    ReadOptions ro;
    ro.spacing_mm = std::array<double, 3>{0.05, 0.05, 0.05};
    const AnyVolume back = read_volume(path, ro);
    CHECK(back.geometry().dims == g.dims);
    CHECK(back.geometry().spacing_mm == g.spacing_mm);
    CHECK(std::memcmp(back.raw(), v.raw(), v.bytes()) == 0);
  }
}

TEST_CASE("npy: bad files are InputErrors naming file and field, before allocation", "[npy]") {
  pbtest::TempDir d;
  const std::string good = v1("{'descr': '<u2', 'fortran_order': False, 'shape': (2, 3, 4), }");
  const std::string data(2 * 3 * 4 * 2, '\x01');
  auto expect_error = [&](const std::string& name, const std::string& bytes, const std::string& fragment) {
    const std::string p = d / name;
    write_file(p, bytes);
    INFO(name);
    try {
      read_volume(p);
      FAIL("no error for " << name);
    } catch (const InputError& e) {
      CHECK_THAT(e.what(), Catch::Contains(p));
      CHECK_THAT(e.what(), Catch::Contains(fragment));
    }
  };
  write_file(d / "good.npy", good + data);
  CHECK(read_volume(d / "good.npy").geometry().dims == std::array<int64_t, 3>{4, 3, 2});
  expect_error("truncated.npy", good + data.substr(1), "is truncated");
  expect_error("longer.npy", good + data + "x", "is larger than its header says");
  expect_error("header-cut.npy", good.substr(0, 40), "is truncated");
  expect_error("magic.npy", "\x93NUMPZ" + good.substr(6) + data, "magic");
  expect_error("version.npy", good.substr(0, 6) + "\x04" + good.substr(7) + data, "format version 4.0");
  expect_error("i8.npy", v1("{'descr': '<i8', 'fortran_order': False, 'shape': (2, 3, 4), }") + data + data,
               "descr '<i8'");
  {  // float64 beyond float32's range (1e300): refused naming the value
    double big[24] = {};
    big[5] = 1e300;
    expect_error("f8-huge.npy",
                 v1("{'descr': '<f8', 'fortran_order': False, 'shape': (2, 3, 4), }") +
                     std::string(reinterpret_cast<const char*>(big), sizeof(big)),
                 "float64 value 1.0000000000000001e+300 is beyond float32's range");
  }
  expect_error("struct.npy", v1("{'descr': [('a', '<u2')], 'fortran_order': False, 'shape': (2, 3, 4), }") + data,
               "structured");
  expect_error("axes.npy", v1("{'descr': '<u2', 'fortran_order': False, 'shape': (2, 3, 4, 1), }") + data,
               "shape (2, 3, 4, 1)");
  expect_error("zero.npy", v1("{'descr': '<u2', 'fortran_order': False, 'shape': (2, 0, 4), }"), "shape (2, 0, 4)");
  expect_error("noorder.npy", v1("{'descr': '<u2', 'shape': (2, 3, 4), }") + data, "fortran_order");
  expect_error("badbool.npy", v1("{'descr': '<u2', 'fortran_order': Maybe, 'shape': (2, 3, 4), }") + data,
               "fortran_order must be True or False");
  std::string huge_len = good;
  huge_len[8] = '\xff', huge_len[9] = '\xff';  // 65535 bytes of header, file far shorter
  expect_error("hdrlen.npy", huge_len + data, "is truncated: header length 65535");
  // a file whose size matches its header but whose voxels exceed the memory budget: refused before
  // allocation (sparse file of 4 MiB, budget 1 MiB)
  {
    const std::string p = d / "budget.npy";
    const std::string h = v1("{'descr': '<f4', 'fortran_order': False, 'shape': (64, 128, 128), }");
    write_file(p, h);
    fs::resize_file(p, h.size() + 64 * 128 * 128 * 4);
    set_memory_budget_bytes(uint64_t(1) << 20);
    try {
      read_volume(p);
      FAIL("no budget error");
    } catch (const MemoryBudgetError& e) {
      CHECK_THAT(e.what(), Catch::Contains(p));
    }
    set_memory_budget_bytes(0);
  }
}

TEST_CASE("npy: score takes a .npy prediction's geometry from the reference", "[npy][cli]") {
  pbtest::TempDir d;
  Geometry g = pbtest::cube(10, 0.05);
  g.origin_mm = {-0.2, -0.2, -0.2};
  Mask ref(g, 0);
  for (int z = 3; z < 6; ++z)
    for (int y = 3; y < 6; ++y)
      for (int x = 3; x < 6; ++x) ref(x, y, z) = 1;
  write_volume(ref, d / "ref.mha");
  write_volume(ref, d / "pred.npy");
  const auto r = pbtest::run_cli("score --pred " + d / "pred.npy" + " --ref " + d / "ref.mha" + " --no-surface --json " +
                                 d / "s.json");
  INFO(r.out << r.err);
  REQUIRE(r.exit_code == 0);
  CHECK_THAT(r.err, Catch::Contains("stores no voxel size"));
  const auto j = pbtest::read_json(d / "s.json");
  CHECK(j["overlap"]["jaccard"].get<double>() == 1.0);  // identical masks
  // convert needs --spacing for .npy (it stores none), like TIFF and raw
  const auto c = pbtest::run_cli("convert " + d / "pred.npy" + " -o " + d / "pred.mha");
  CHECK(c.exit_code == 2);
  CHECK_THAT(c.err, Catch::Contains("--spacing"));
  CHECK_FALSE(fs::exists(d / "pred.mha"));
}

TEST_CASE("npy: float64 is read as float32 as numpy rounds it", "[npy]") {
  // numpy (tests/ref/npy_numpy.py f8) writes float64 volumes (both byte orders, C and Fortran order)
  // and its own astype(np.float32) of each; porebench must read the first exactly as the second,
  // and tell that values were rounded (the read note).
  pbtest::TempDir d;
  const auto w = pbtest::run_ref_script("npy_numpy.py", "f8 " + d / "np");
  INFO(w.out << w.err);
  REQUIRE(w.exit_code == 0);
  std::vector<std::string> notes;
  set_read_note([&](const std::string& m) { notes.push_back(m); });
  for (const std::string name : {"le_C", "le_F", "be_C", "be_F"}) {
    INFO(name);
    notes.clear();
    const AnyVolume v = read_volume(d / ("np/f8_" + name + ".npy"));
    const AnyVolume want = read_volume(d / ("np/as32_" + name + ".npy"));
    REQUIRE(v.type() == VoxelType::f32);
    CHECK(v.geometry().dims == std::array<int64_t, 3>{3, 4, 5});
    CHECK(std::memcmp(v.raw(), want.raw(), want.bytes()) == 0);
    REQUIRE(notes.size() == 1);
    CHECK_THAT(notes[0], Catch::Contains("58 of 60 float64 values are not exactly float32"));
  }
  set_read_note({});
  // numbers that float32 holds exactly: no note; NaN goes to the non-finite check of read_volume
  double exact[8] = {0.5, -2, 0, 1, 0.25, 3, 1024, -0.125};
  const std::string h = v1("{'descr': '<f8', 'fortran_order': False, 'shape': (2, 4), }");
  write_file(d / "exact.npy", h + std::string(reinterpret_cast<const char*>(exact), sizeof(exact)));
  notes.clear();
  set_read_note([&](const std::string& m) { notes.push_back(m); });
  CHECK(at(read_volume(d / "exact.npy"), 6) == 1024.0);
  CHECK(notes.empty());
  exact[3] = NAN;
  write_file(d / "nan.npy", h + std::string(reinterpret_cast<const char*>(exact), sizeof(exact)));
  CHECK_THROWS_WITH(read_volume(d / "nan.npy"), Catch::Contains("1 non-finite voxel"));
  set_read_note({});
}

TEST_CASE("npy: convert -o x.npy writes what numpy loads; the round trip gives the voxels back", "[npy][cli]") {
  // Source: numpy.load (tests/ref/npy_numpy.py check), the format's own implementation.
  pbtest::TempDir d;
  for (const std::string dtype : {"u1", "u2", "i2", "f4"}) {
    INFO(dtype);
    const Geometry g{{3, 4, 5}, {0.0104, 0.0104, 0.012}, {1.0, 2.0, 3.0}};
    const AnyVolume v = expected_volume(dtype, g);
    write_volume(v, d / (dtype + ".mha"));
    const std::string npy = d / (dtype + ".npy");
    const auto c = pbtest::run_cli("convert " + (d / (dtype + ".mha")) + " -o " + npy);
    INFO(c.out << c.err);
    REQUIRE(c.exit_code == 0);
    CHECK_THAT(c.out, Catch::Contains("--spacing 0.0104,0.0104,0.012"));
    const auto r = pbtest::run_ref_script("npy_numpy.py", "check " + npy + " " + dtype + " 5 4 3");
    INFO(r.out << r.err);
    CHECK(r.out == "ok\n");
    // Back through convert: .npy in needs the spacing; the voxels come back unchanged.
    CHECK(pbtest::run_cli("convert " + npy + " -o " + (d / (dtype + "-back.mha"))).exit_code == 2);
    REQUIRE(pbtest::run_cli("convert " + npy + " --spacing 0.0104,0.0104,0.012 -o " + (d / (dtype + "-back.mha"))).exit_code == 0);
    const AnyVolume back = read_volume(d / (dtype + "-back.mha"));
    CHECK(back.type() == v.type());
    CHECK(back.geometry().dims == g.dims);
    CHECK(back.geometry().spacing_mm == g.spacing_mm);
    CHECK(std::memcmp(back.raw(), v.raw(), v.bytes()) == 0);
  }
  const auto z = pbtest::run_cli("convert " + (d / "u1.mha") + " --compress -o " + (d / "z.npy"));
  CHECK(z.exit_code == 2);
  CHECK_THAT(z.err, Catch::Contains("z.npy") && Catch::Contains("--compress"));
  const auto help = pbtest::run_cli("convert --help");
  CHECK_THAT(help.out, Catch::Contains(".npy"));
}
