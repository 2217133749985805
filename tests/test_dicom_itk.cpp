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

#include "core/error.hpp"
#include "core/io.hpp"
#include "core/json.hpp"
#include "suites/layout.hpp"
#include "tests/helpers.hpp"
#include "tests/json_files.hpp"
#include "tests/paired_helpers.hpp"

using namespace pb;
namespace fs = std::filesystem;

namespace {

using Img3 = itk::Image<int16_t, 3>;

// Writes `v` as a DICOM series of one file per z slice into `dir` (names IM0001`ext`, ...), with
// the given direction cosines (columns: the x, y, z axes in patient mm).
void write_series(const Image<int16_t>& v, const std::string& dir, const Img3::DirectionType& direction,
                  const std::string& ext) {
  fs::create_directories(dir);
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
  // Modality CT: GDCM then writes a CT Image Storage object, which carries Image Position
  // (Patient), Image Orientation (Patient) and Pixel Spacing (a Secondary Capture does not).
  auto io = itk::GDCMImageIO::New();
  itk::EncapsulateMetaData<std::string>(io->GetMetaDataDictionary(), "0008|0060", "CT");
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

}  // namespace

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
