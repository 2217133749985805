// DICOM series folders (issue 12): written here by ITK itself (ImageSeriesWriter + GDCMImageIO, which
// store each slice's Image Position, Image Orientation and Pixel Spacing from the image geometry,
// as in ITK's own DICOM series examples), read back by porebench's reader (read_volume: GDCM
// series file names, ImageSeriesReader) and from a paired suite's file entry. The known answer is
// the geometry and the voxels the test wrote.
#include <itkGDCMImageIO.h>
#include <itkImage.h>
#include <itkImageSeriesWriter.h>
#include <itkMetaDataObject.h>
#include <itkNumericSeriesFileNames.h>

#include <catch2/catch.hpp>
#include <filesystem>
#include <fstream>
#include <iostream>
#include <sstream>

#include "core/dicom.hpp"
#include "core/error.hpp"
#include "core/io.hpp"
#include "core/json.hpp"
#include "suites/layout.hpp"
#include "suites/preflight.hpp"
#include "suites/suite.hpp"
#include "tests/helpers.hpp"
#include "tests/json_files.hpp"
#include "tests/paired_helpers.hpp"

using namespace pb;
namespace fs = std::filesystem;

namespace {

using Img3 = itk::Image<int16_t, 3>;

// std::cerr swapped for a buffer while alive: what a call printed there.
struct CerrBuffer {
  std::ostringstream buf;
  std::streambuf* old = std::cerr.rdbuf(buf.rdbuf());
  ~CerrBuffer() { std::cerr.rdbuf(old); }
};

// Writes `v` as a DICOM series of one file per z slice into `dir` (names IM0001`ext`, ...), with
// the given direction cosines (columns: the x, y, z axes in patient mm).
void write_series(const Image<int16_t>& v, const std::string& dir, const Img3::DirectionType& direction,
                  const std::string& ext, const std::vector<std::pair<std::string, std::string>>& tags = {{"0008|0060", "CT"}}) {
  fs::create_directories(dir);
  CerrBuffer quiet;  // GDCM's warnings while writing a Secondary Capture
  auto img = Img3::New();
  Img3::SizeType size;
  Img3::SpacingType spacing;
  Img3::PointType origin;
  for (unsigned i = 0; i < 3; ++i) {
    size[i] = size_t(v.geometry().dims[i]);
    spacing[i] = v.geometry().spacing_mm[i];
    origin[i] = v.geometry().origin_mm[i];
  }
  img->SetRegions(Img3::RegionType(size));
  img->SetSpacing(spacing);
  img->SetOrigin(origin);
  img->SetDirection(direction);
  img->Allocate();
  std::copy(v.data(), v.data() + v.size(), img->GetBufferPointer());
  auto names = itk::NumericSeriesFileNames::New();
  names->SetStartIndex(1);
  names->SetEndIndex(itk::SizeValueType(size[2]));
  names->SetIncrementIndex(1);
  names->SetSeriesFormat(dir + "/IM%04d" + ext);
  // Modality CT (the default `tags`): GDCM then writes a CT Image Storage object, which carries
  // Image Position (Patient), Image Orientation (Patient) and Pixel Spacing. Without a modality it
  // writes a Secondary Capture: Nominal Scanned Pixel Spacing (0018,2010) but no Image Position.
  auto io = itk::GDCMImageIO::New();
  for (const auto& [key, value] : tags) itk::EncapsulateMetaData<std::string>(io->GetMetaDataDictionary(), key, value);
  itk::EncapsulateMetaData<std::string>(io->GetMetaDataDictionary(), "0028|0004", "MONOCHROME2");
  auto writer = itk::ImageSeriesWriter<Img3, itk::Image<int16_t, 2>>::New();
  writer->SetImageIO(io);
  writer->SetFileNames(names->GetFileNames());
  writer->SetInput(img);
  writer->Update();
}

// Direction cosines with the axes kept (+1) or reversed (-1).
Img3::DirectionType axes(double sx, double sy, double sz) {
  Img3::DirectionType dir;
  dir.Fill(0);
  dir[0][0] = sx, dir[1][1] = sy, dir[2][2] = sz;
  return dir;
}

const Geometry kGeo{{12, 10, 8}, {0.02, 0.025, 0.03}, {1.5, -2.0, 3.0}};

Image<int16_t> pattern(const Geometry& g) {
  Image<int16_t> v(g);
  for (int64_t z = 0; z < g.dims[2]; ++z)
    for (int64_t y = 0; y < g.dims[1]; ++y)
      for (int64_t x = 0; x < g.dims[0]; ++x) v(x, y, z) = int16_t(x + 20 * y + 400 * z);
  return v;
}

// One DICOM Part 10 file written byte by byte (PS3.10 file meta information, PS3.5 explicit VR
// little endian) of `cols` x `rows` uint16 voxels: a CT Image Storage object, or a Secondary
// Capture when `sop` says so, with Pixel Spacing (0028,0030) = "ROW\\COLUMN" mm when
// `pixel_spacing` is not empty (PS3.3: the first value is the distance between rows, i.e. along y,
// the second between columns, along x) and without it else; Spacing Between Slices (0018,0088) =
// `slice_spacing` mm when that is not empty.
void write_dicom_file(const std::string& path, int cols, int rows, const std::vector<uint16_t>& pixels,
                      const std::string& pixel_spacing, const std::string& sop = "1.2.840.10008.5.1.4.1.1.2",
                      const std::string& slice_spacing = "") {
  auto element = [](uint16_t group, uint16_t elem, const char* vr, std::string value) {
    const bool long_form = std::string(vr) == "OB" || std::string(vr) == "OW";
    if (value.size() % 2) value += std::string(vr) == "UI" ? '\0' : ' ';
    std::string e;
    auto u16 = [&e](uint16_t x) { e += char(x & 0xff), e += char(x >> 8); };
    u16(group), u16(elem), e += vr;
    if (long_form) {
      u16(0);
      const uint32_t n = uint32_t(value.size());
      for (int b = 0; b < 4; ++b) e += char((n >> (8 * b)) & 0xff);
    } else {
      u16(uint16_t(value.size()));
    }
    return e + value;
  };
  auto us = [](uint16_t x) { return std::string{char(x & 0xff), char(x >> 8)}; };
  const std::string& sc = sop, uid = "1.2.826.0.1.3680043.2.1125.99.1";
  std::string meta = element(0x0002, 0x0001, "OB", std::string{'\0', '\1'}) + element(0x0002, 0x0002, "UI", sc) +
                     element(0x0002, 0x0003, "UI", uid) + element(0x0002, 0x0010, "UI", "1.2.840.10008.1.2.1");
  const uint32_t n = uint32_t(meta.size());
  std::string group_length = element(0x0002, 0x0000, "UL", std::string{char(n & 0xff), char((n >> 8) & 0xff), char((n >> 16) & 0xff), char(n >> 24)});
  std::string data = element(0x0008, 0x0016, "UI", sc) + element(0x0008, 0x0018, "UI", uid) + element(0x0008, 0x0060, "CS", sop == "1.2.840.10008.5.1.4.1.1.2" ? "CT" : "OT");
  if (!slice_spacing.empty()) data += element(0x0018, 0x0088, "DS", slice_spacing);
  data += element(0x0028, 0x0002, "US", us(1)) + element(0x0028, 0x0004, "CS", "MONOCHROME2") +
                     element(0x0028, 0x0010, "US", us(uint16_t(rows))) + element(0x0028, 0x0011, "US", us(uint16_t(cols)));
  if (!pixel_spacing.empty()) data += element(0x0028, 0x0030, "DS", pixel_spacing);
  data += element(0x0028, 0x0100, "US", us(16)) + element(0x0028, 0x0101, "US", us(16)) + element(0x0028, 0x0102, "US", us(15)) +
          element(0x0028, 0x0103, "US", us(0));
  std::string px;
  for (uint16_t p : pixels) px += us(p);
  data += element(0x7fe0, 0x0010, "OW", px);
  std::ofstream f(path, std::ios::binary);
  f << std::string(128, '\0') << "DICM" << group_length << meta << data;
}

}  // namespace

TEST_CASE("DICOM without its voxel-size tags: refused naming the file and the tag unless the spacing is given",
          "[io][dicom][paired]") {
  pbtest::TempDir d;
  // Source: DICOM PS3.3 C.7.6.2.1.1 (Pixel Spacing: row spacing, then column spacing) and PS3.5
  // explicit VR little endian, from memory; the file is written byte by byte above.
  std::vector<uint16_t> px(6 * 4);
  for (size_t i = 0; i < px.size(); ++i) px[i] = uint16_t(100 + 7 * i);
  const std::string with = d / "with.dcm", without = d / "without.dcm", flat = d / "flat.dcm";
  write_dicom_file(with, 6, 4, px, "0.025\\0.02", "1.2.840.10008.5.1.4.1.1.2", "0.03");
  write_dicom_file(without, 6, 4, px, "");
  write_dicom_file(flat, 6, 4, px, "0.025\\0.02");  // in-plane spacing, nothing for z
  {
    // A single slice: GDCM reads no z spacing for a single-frame CT object, not even Spacing
    // Between Slices (0018,0088); refused unless the voxel size is given (issue 12).
    CerrBuffer err;
    CHECK_THROWS_AS(read_volume(flat), DicomGeometryMissing);
    CHECK_THROWS_WITH(read_volume(flat), Catch::Contains(flat) && Catch::Contains("Spacing Between Slices (0018,0088)") &&
                                             Catch::Contains("single slice") && Catch::Contains("--spacing"));
    // Refused for z alone: the in-plane check before it found GDCM's x = the column spacing 0.02
    // and y = the row spacing 0.025 (PS3.3 order), as it refuses otherwise.
    CHECK_THROWS_WITH(read_volume(with), Catch::Contains(with) && Catch::Contains("(0018,0088) = 0.03") &&
                                             Catch::Contains("it reads 1 mm") && !Catch::Contains("Pixel Spacing"));
    CHECK(err.buf.str().empty());
    ReadOptions given_z;
    given_z.spacing_mm = std::array<double, 3>{0.02, 0.025, 0.04};
    const AnyVolume r = read_volume(with, given_z);
    REQUIRE(r.type() == VoxelType::u16);
    CHECK(r.geometry().dims == std::array<int64_t, 3>{6, 4, 1});
    CHECK(r.geometry().spacing_mm[2] == 0.04);
    const uint16_t* back = static_cast<const uint16_t*>(r.raw());
    CHECK(std::equal(px.begin(), px.end(), back));
    CHECK(read_volume(flat, given_z).geometry().spacing_mm[2] == 0.04);
  }
  {
    CerrBuffer err;  // GDCM's own warnings do not reach stderr
    CHECK_THROWS_MATCHES(read_volume(without), DicomGeometryMissing,
                         Catch::Matchers::Predicate<std::exception>([&](const std::exception& e) {
                           const std::string m = e.what();
                           return m.find(without) != std::string::npos && m.find("Pixel Spacing (0028,0030)") != std::string::npos;
                         }, "names the file and Pixel Spacing (0028,0030)"));
    CHECK(err.buf.str().empty());
  }
  ReadOptions given;
  given.spacing_mm = std::array<double, 3>{0.03, 0.03, 0.03};
  CHECK(read_volume(without, given).geometry().spacing_mm[0] == 0.03);
  // A Secondary Capture (1.2.840.10008.5.1.4.1.1.7) with Pixel Spacing: GDCM takes Nominal Scanned
  // Pixel Spacing (0018,2010) for that class and reads 1 mm; refused naming the tag it ignored.
  write_dicom_file(d / "sc.dcm", 6, 4, px, "0.025\\0.02", "1.2.840.10008.5.1.4.1.1.7");
  CHECK_THROWS_WITH(read_volume(d / "sc.dcm"), Catch::Contains(d / "sc.dcm") && Catch::Contains("Pixel Spacing (0028,0030) = 0.025"));

  // A series that ITK writes as a Secondary Capture (no modality): in-plane spacing in (0018,2010)
  // but no Image Position (Patient); GDCM would stack it at 1 mm.
  const Image<int16_t> v = pattern(kGeo);
  write_series(v, d / "sc", axes(1, 1, 1), ".dcm", {});
  {
    CerrBuffer err;
    CHECK_THROWS_WITH(read_volume(d / "sc"), Catch::Contains(d / "sc/IM0001.dcm") &&
                                                 Catch::Contains("Image Position (Patient) (0020,0032)") &&
                                                 Catch::Contains("spacing_mm") && Catch::Contains("--spacing"));
    CHECK(err.buf.str().empty());
  }
  ReadOptions z;
  z.spacing_mm = std::array<double, 3>{0.02, 0.025, 0.03};
  const AnyVolume r = read_volume(d / "sc", z);
  REQUIRE(r.geometry().dims == kGeo.dims);
  const int16_t* back = static_cast<const int16_t*>(r.raw());
  CHECK(std::equal(back, back + v.size(), v.data()));

  // The command line: exit 2 naming file and tag, no GDCM text on stderr; --spacing reads it.
  const auto bad = pbtest::run_cli("convert " + (d / "sc") + " -o " + (d / "sc.mha"));
  CHECK(bad.exit_code == 2);
  CHECK_THAT(bad.err, Catch::Contains("IM0001.dcm") && Catch::Contains("(0020,0032)"));
  CHECK_THAT(bad.err, !Catch::Contains("Warning: In"));
  CHECK_FALSE(fs::exists(d / "sc.mha"));
  const auto ok = pbtest::run_cli("convert " + without + " --spacing 0.02,0.025,0.1 -o " + (d / "one.mha"));
  INFO(ok.err);
  CHECK(ok.exit_code == 0);
  CHECK(read_volume(d / "one.mha").geometry().spacing_mm[2] == Approx(0.1));

  // A paired suite: the reference series without spacing_mm is refused at the preflight; with it, accepted.
  write_volume(v, d / "fast.mha");
  const std::string head = "[[dataset]]\nname = \"sc\"\nkind = \"paired\"\nreference_method = \"otsu\"\nalign = \"none\"\n";
  const std::string tail = "scans = [ { path = \"fast.mha\", projections = 400 } ]\n[[method]]\nname = \"otsu\"\n";
  pbtest::expect_suite_refused(d / "bad.toml", head + "reference_scan = \"sc\"\n" + tail,
                               {"reference_scan", "IM0001.dcm", "Image Position (Patient) (0020,0032)"});
  pbtest::write_file(d / "good.toml", head + "reference_scan = { path = \"sc\", spacing_mm = [0.02, 0.025, 0.03] }\n" + tail);
  CHECK_NOTHROW(suite::preflight(suite::load_suite(d / "good.toml")));
}

TEST_CASE("a DICONDE CT series and one of its files read back exactly", "[io][dicom]") {
  // DICONDE (ASTM E2339, with a practice per method; for CT, from memory, ASTM E2767) is DICOM's
  // file format and information objects with the patient replaced by the component under test:
  // from memory, a CT series keeps CT Image Storage and Modality CT, the component's name and
  // serial number take (0010,0010) and (0010,0020), and NDE-specific attributes sit in group
  // 0x0014. We know of no NDE-specific Modality value; what makes these files DICONDE here is the
  // component identification. Reading must not depend on any of it: the known answer is the
  // geometry and the voxels written (a gear blank of glass-filled polyamide, invented).
  pbtest::TempDir d;
  const Geometry g{{9, 7, 5}, {0.0104, 0.0104, 0.012}, {-4.0, 2.5, 10.0}};
  const Image<int16_t> v = pattern(g);
  write_series(v, d / "diconde", axes(1, 1, 1), ".dcm",
               {{"0008|0060", "CT"}, {"0010|0010", "GEAR BLANK PA66-GF30"}, {"0010|0020", "GB-0042"},
                {"0008|0070", "WORKSHOP CT"}, {"0018|0060", "160"}});
  auto header = itk::GDCMImageIO::New();
  header->SetFileName(d / "diconde/IM0003.dcm");
  header->ReadImageInformation();
  std::string component, modality;
  itk::ExposeMetaData<std::string>(header->GetMetaDataDictionary(), "0010|0010", component);
  itk::ExposeMetaData<std::string>(header->GetMetaDataDictionary(), "0008|0060", modality);
  CHECK_THAT(component, Catch::StartsWith("GEAR BLANK PA66-GF30"));
  CHECK_THAT(modality, Catch::StartsWith("CT"));
  CerrBuffer err;
  const AnyVolume r = read_volume(d / "diconde");
  REQUIRE(r.type() == VoxelType::i16);
  CHECK(r.geometry().dims == g.dims);
  for (int i = 0; i < 3; ++i) {
    CHECK(r.geometry().spacing_mm[size_t(i)] == Approx(g.spacing_mm[size_t(i)]).epsilon(1e-6));
    CHECK(r.geometry().origin_mm[size_t(i)] == Approx(g.origin_mm[size_t(i)]).margin(1e-6));
  }
  const int16_t* back = static_cast<const int16_t*>(r.raw());
  CHECK(std::equal(back, back + v.size(), v.data()));
  // One file of it alone: a single slice, whose z spacing no tag GDCM reads states (refused
  // unless given, issue 12); given, its slice (z = 2) with the origin from its own header.
  CHECK_THROWS_WITH(read_volume(d / "diconde/IM0003.dcm"), Catch::Contains("IM0003.dcm") && Catch::Contains("single slice"));
  ReadOptions given;
  given.spacing_mm = std::array<double, 3>{0.0104, 0.0104, 0.012};
  const AnyVolume one = read_volume(d / "diconde/IM0003.dcm", given);
  REQUIRE(one.geometry().dims == std::array<int64_t, 3>{9, 7, 1});
  CHECK(one.geometry().origin_mm[2] == Approx(10.0 + 2 * 0.012).margin(1e-6));
  const int16_t* slice = static_cast<const int16_t*>(one.raw());
  CHECK(std::equal(slice, slice + 63, v.data() + 2 * 63));
  CHECK(err.buf.str().empty());
}

TEST_CASE("DICOM series written by ITK read back with their spacing, origin and voxels", "[io][dicom][paired]") {
  const Geometry& g = kGeo;
  const Image<int16_t> v = pattern(g);
  pbtest::TempDir d;
  for (const std::string ext : {".dcm", ""}) {  // "": no extension, found by the Part 10 mark "DICM"
    INFO("extension '" << ext << "'");
    const std::string dir = d / ("series" + ext);
    write_series(v, dir, axes(1, 1, 1), ext);
    CHECK(is_dicom(dir));
    CHECK_FALSE(spacing_unknown(dir));  // the headers state it
    const AnyVolume r = read_volume(dir);
    REQUIRE(r.type() == VoxelType::i16);
    const Geometry& rg = r.geometry();
    CHECK(rg.dims == g.dims);
    for (int i = 0; i < 3; ++i) {
      CHECK(rg.spacing_mm[size_t(i)] == Approx(g.spacing_mm[size_t(i)]).epsilon(1e-5));
      CHECK(rg.origin_mm[size_t(i)] == Approx(g.origin_mm[size_t(i)]).margin(1e-5));
    }
    const int16_t* back = static_cast<const int16_t*>(r.raw());
    CHECK(std::equal(back, back + v.size(), v.data()));
  }
  // A TIFF folder stays a TIFF folder (no voxel size of its own).
  fs::create_directories(d.path / "tif");
  write_volume(Image<uint16_t>(pbtest::cube(4, 0.01)), (d.path / "tif" / "s_0001.tif").string());
  CHECK_FALSE(is_dicom((d.path / "tif").string()));
  CHECK(spacing_unknown((d.path / "tif").string()));
}

TEST_CASE("DICOM orientation from the headers: flipped axes undone exactly, oblique refused", "[io][dicom]") {
  pbtest::TempDir d;
  const Image<int16_t> v = pattern(kGeo);
  const Geometry& g = kGeo;
  // y and z reversed (a proper rotation: 180 degrees about x). Voxel (x, y, z) of the file lies at
  // origin + (x sx, -y sy, -z sz); on axis-aligned axes it is voxel (x, ny-1-y, nz-1-z) with the
  // origin at the file's voxel (0, ny-1, nz-1).
  write_series(v, d / "flip", axes(1, -1, -1), ".dcm");
  const AnyVolume r = read_volume(d / "flip");
  REQUIRE(r.type() == VoxelType::i16);
  const Geometry& rg = r.geometry();
  REQUIRE(rg.dims == g.dims);
  CHECK(rg.origin_mm[0] == Approx(1.5).margin(1e-5));
  CHECK(rg.origin_mm[1] == Approx(-2.0 - 9 * 0.025).margin(1e-5));
  CHECK(rg.origin_mm[2] == Approx(3.0 - 7 * 0.03).margin(1e-5));
  const int16_t* back = static_cast<const int16_t*>(r.raw());
  int64_t wrong = 0;
  for (int64_t z = 0; z < 8; ++z)
    for (int64_t y = 0; y < 10; ++y)
      for (int64_t x = 0; x < 12; ++x) wrong += back[x + 12 * (y + 10 * z)] != v(x, 9 - y, 7 - z);
  CHECK(wrong == 0);
  // Oblique (10 degrees about z): refused with the file named, not read askew.
  Img3::DirectionType oblique = axes(1, 1, 1);
  const double c = std::cos(10 * M_PI / 180), s = std::sin(10 * M_PI / 180);
  oblique[0][0] = c, oblique[0][1] = -s, oblique[1][0] = s, oblique[1][1] = c;
  write_series(v, d / "tilted", oblique, ".dcm");
  CHECK_THROWS_WITH(read_volume(d / "tilted"), Catch::Contains("tilted") && Catch::Contains("oblique orientation"));
}

TEST_CASE("a DICOM series folder as a paired suite's reference scan", "[paired][dicom][suite]") {
  pbtest::TempDir d;
  // 24^3 voxels of 15 um: material 1000, three closed pores at 100.
  const Geometry g{{24, 24, 24}, {0.015, 0.015, 0.015}, {0, 0, 0}};
  Image<int16_t> v(g);
  for (int64_t i = 0; i < v.size(); ++i) v[i] = 1000;
  const int balls[][4] = {{8, 8, 6, 2}, {15, 14, 12, 3}, {10, 16, 18, 2}};
  for (const auto& b : balls)
    for (int z = 0; z < 24; ++z)
      for (int y = 0; y < 24; ++y)
        for (int x = 0; x < 24; ++x)
          if ((x - b[0]) * (x - b[0]) + (y - b[1]) * (y - b[1]) + (z - b[2]) * (z - b[2]) <= b[3] * b[3]) v(x, y, z) = 100;
  write_series(v, d / "ref-series", axes(1, 1, 1), "");
  write_volume(v, d / "fast.mha");
  const std::string head = "[[dataset]]\nname = \"dicom\"\nkind = \"paired\"\nreference_method = \"otsu\"\nalign = \"none\"\n";
  const std::string tail = "scans = [ { path = \"fast.mha\", projections = 400 } ]\n[[method]]\nname = \"otsu\"\n"
                           "[calibration]\nfraction = 0.3\ngap_slices = 2\n";
  // Without spacing_mm (the headers state it), and a contradicting spacing_mm refused.
  pbtest::expect_suite_refused(d / "bad.toml", head + "reference_scan = { path = \"ref-series\", spacing_mm = [0.01, 0.01, 0.01] }\n" + tail,
                               {"reference_scan", "conflicting geometry", "ref-series", "0.015"});
  pbtest::write_file(d / "s.toml", head + "reference_scan = \"ref-series\"\n" + tail);
  const auto r = pbtest::run_cli("run " + (d / "s.toml") + " -o " + (d / "out"));
  INFO(r.out << r.err);
  REQUIRE(r.exit_code == 0);
  const auto res = suite::read_json_file((d.path / "out" / "results.json").string());
  const auto& var = res["datasets"][0]["variants"][0];
  // Read on the fast scan's own grid: nothing resampled, no shift; the reference's pores are the truth.
  CHECK(var["alignment"]["resampled"].is_null());
  CHECK(var["alignment"]["shift_check"]["magnitude_voxel"].get<double>() < 0.1);
  REQUIRE(res["cells"].size() == 1);
  CHECK(res["cells"][0]["status"] == "ok");
  CHECK(suite::metric_value(res["cells"][0], "test", "jaccard") == Approx(1.0));
  CHECK(res["datasets"][0]["reference"]["grid"].get<std::string>().find("0.015") != std::string::npos);
}
