// libporebench_dicom.so: DICOM (and DICONDE) series and files through ITK's GDCM reader
// (GDCMSeriesFileNames orders the slices by position, ImageSeriesReader + GDCMImageIO read them with
// the header geometry), behind the C entry points of dicom_abi.h. GDCM builds its data dictionaries
// when it is loaded (~45 ms of CPU): as a module it is opened by core/io_itk.cpp on the first DICOM
// input only (issue 16). Messages and refusals as core/dicom.hpp describes.
#include <itkGDCMImageIO.h>
#include <itkGDCMSeriesFileNames.h>
#include <itkImageSeriesReader.h>
#include <itkMetaDataObject.h>
#include <itkOrientImageFilter.h>

#include <cstring>
#include <filesystem>
#include <iostream>
#include <set>
#include <sstream>
#include <string>
#include <vector>

#include "core/dicom_module/dicom_abi.h"

namespace fs = std::filesystem;

namespace {

thread_local std::string g_error;

// A refusal inside the module, returned by pb_dicom_read as its status and message.
struct Failure {
  int kind;
  std::string message;
};
[[noreturn]] void fail(int kind, const std::string& message) { throw Failure{kind, message}; }

// The files of a DICOM path: one file, or the one series of a folder ordered by slice position.
std::vector<std::string> dicom_files(const std::string& path) {
  if (!fs::is_directory(path)) return {path};
  auto names = itk::GDCMSeriesFileNames::New();
  names->SetUseSeriesDetails(false);
  names->SetDirectory(path);
  const auto& uids = names->GetSeriesUIDs();
  if (uids.empty()) fail(PB_DICOM_BAD_INPUT, "DICOM folder " + path + " holds no readable DICOM series");
  if (uids.size() > 1) {
    std::string list;
    for (const auto& u : uids) list += (list.empty() ? "" : ", ") + u;
    fail(PB_DICOM_BAD_INPUT, "DICOM folder " + path + " holds " + std::to_string(uids.size()) + " series (" + list +
                     "); give a folder with one series");
  }
  return names->GetFileNames(uids.front());
}

// GDCM and ITK write their warnings to std::cerr ("Warning: In FILE, line N, function F" and the
// text on the next line); while a DICOM input is read, std::cerr goes here instead. Single-threaded
// (the reader runs on the calling thread; nothing else logs meanwhile).
class CerrCapture {
 public:
  CerrCapture() : old_(std::cerr.rdbuf(buf_.rdbuf())) {}
  ~CerrCapture() { std::cerr.rdbuf(old_); }
  CerrCapture(const CerrCapture&) = delete;
  CerrCapture& operator=(const CerrCapture&) = delete;
  // The distinct message lines (without the source-location lines), as " (GDCM: a; b)" or "".
  std::string notes() const {
    std::istringstream in(buf_.str());
    std::vector<std::string> lines;
    std::set<std::string> seen;
    for (std::string line; std::getline(in, line);) {
      if (line.empty() || line.rfind("Warning: In ", 0) == 0 || line.rfind("Error: In ", 0) == 0 ||
          line.rfind("Debug: In ", 0) == 0)
        continue;
      if (seen.insert(line).second) lines.push_back(line);
    }
    std::string out;
    for (size_t i = 0; i < lines.size() && i < 4; ++i) out += (i ? "; " : "") + lines[i];
    return out.empty() ? out : " (GDCM: " + out + (lines.size() > 4 ? "; ..." : "") + ")";
  }

 private:
  std::ostringstream buf_;
  std::streambuf* old_;
};

std::string tag_text(const itk::MetaDataDictionary& d, const char* key) {
  std::string v;
  if (!itk::ExposeMetaData<std::string>(d, key, v)) return "";
  const auto b = v.find_first_not_of(" \\");
  return b == std::string::npos ? "" : v.substr(b);
}

// Refuses a DICOM input whose tags do not state its voxel size (see core/dicom.hpp): per file the
// in-plane spacing, between the files of a series each file's position, in a multi-frame file the
// frame spacing, in a single slice (one file of one frame) its z spacing. `dicts[i]` is the header
// of `files[i]`; `x_mm`, `y_mm`, `z_mm` the spacing GDCM read. An in-plane tag counts only when GDCM took it: it picks the tag by the object's class
// (e.g. Nominal Scanned Pixel Spacing for a Secondary Capture) and reads 1 mm when that one is missing.
void check_geometry_tags(const std::vector<std::string>& files, const std::vector<const itk::MetaDataDictionary*>& dicts,
                         double x_mm, double y_mm, double z_mm, const std::string& path, const std::string& notes) {
  auto refuse = [&](const std::string& file, const std::string& tag, const std::string& what) {
    fail(PB_DICOM_NO_GEOMETRY, (file == path ? "DICOM file " + path : "DICOM input " + path + ": " + file) + " has no " + tag + ", so its " + what +
                               " is unknown (GDCM would read 1 mm); give the voxel size (spacing_mm in the suite file, "
                               "--spacing X,Y,Z in mm on the command line)" + notes);
  };
  static const std::pair<const char*, const char*> in_plane[] = {{"0028|0030", "Pixel Spacing (0028,0030)"},
                                                                  {"0018|1164", "Imager Pixel Spacing (0018,1164)"},
                                                                  {"0018|2010", "Nominal Scanned Pixel Spacing (0018,2010)"}};
  for (size_t i = 0; i < files.size() && i < dicts.size(); ++i) {
    const itk::MetaDataDictionary& d = *dicts[i];
    const bool frame_groups = tag_text(d, "0028|0009").find("5200,9230") != std::string::npos;
    bool taken = frame_groups;
    std::string ignored;  // a spacing tag present but not the one GDCM read
    for (const auto& [key, name] : in_plane) {
      const std::string t = tag_text(d, key);
      if (t.empty()) continue;
      double row = 0, col = 0;  // DICOM order: spacing between rows (y), then between columns (x)
      char sep = 0;
      std::istringstream in(t);
      const bool parsed = bool(in >> row >> sep >> col) && sep == '\\';
      if (parsed && std::abs(col - x_mm) <= 1e-6 * col && std::abs(row - y_mm) <= 1e-6 * row) taken = true;
      else if (ignored.empty()) ignored = std::string(name) + " = " + t;
    }
    if (!taken)
      refuse(files[i], ignored.empty() ? "Pixel Spacing (0028,0030)"
                                       : "in-plane spacing GDCM takes for its object class (it has " + ignored +
                                             ", which GDCM does not read for it)",
             "in-plane voxel size");
    if (files.size() > 1 && tag_text(d, "0020|0032").empty())
      refuse(files[i], "Image Position (Patient) (0020,0032)", "slice position (the spacing between slices)");
    const std::string frames = tag_text(d, "0028|0008");
    if (files.size() == 1 && !frames.empty() && std::atoi(frames.c_str()) > 1 && !frame_groups &&
        tag_text(d, "0018|0088").empty())
      refuse(files[i], "Spacing Between Slices (0018,0088)", "frame spacing");
    // A single slice: no second position, no frames. Its z spacing counts only where Spacing
    // Between Slices (0018,0088) states it and GDCM took that value; Slice Thickness (0018,0050)
    // is the width of the slice, not the distance to a next one (PS3.3 C.7.6.2, from memory).
    if (files.size() == 1 && (frames.empty() || std::atoi(frames.c_str()) <= 1) && !frame_groups) {
      const std::string t = tag_text(d, "0018|0088");
      const double stated = t.empty() ? 0.0 : std::atof(t.c_str());
      // GDCM 3 reads 1 mm for a single-frame CT Image Storage object even with (0018,0088).
      if (!(stated > 0 && std::abs(stated - z_mm) <= 1e-6 * stated)) {
        std::ostringstream read;
        read << z_mm;
        refuse(files[i],
               t.empty() ? "Spacing Between Slices (0018,0088)"
                         : "z spacing GDCM takes (it has Spacing Between Slices (0018,0088) = " + t +
                               ", which GDCM does not read for it: it reads " + read.str() + " mm)",
               "z spacing (a single slice)");
      }
    }
  }
}

template <class T>
void read_dicom_as(const std::vector<std::string>& files, const std::string& path, bool spacing_given,
                   const CerrCapture& gdcm, const pb_dicom_host& host, int type) {
  using Img = itk::Image<T, 3>;
  auto reader = itk::ImageSeriesReader<Img>::New();
  reader->SetImageIO(itk::GDCMImageIO::New());
  reader->SetFileNames(files);
  reader->UpdateOutputInformation();
  const auto size = reader->GetOutput()->GetLargestPossibleRegion().GetSize();
  // ITK's buffer and ours: twice the volume while it is copied.
  const std::string what = "DICOM input " + path + " (" + std::to_string(size[0]) + " x " +
                           std::to_string(size[1]) + " x " + std::to_string(size[2]) + ")";
  const uint64_t voxels[3] = {uint64_t(size[0]), uint64_t(size[1]), uint64_t(size[2])};
  if (host.check_memory(host.ctx, voxels, 2 * sizeof(T), what.c_str()))
    throw Failure{PB_DICOM_HOST, ""};
  reader->Update();
  if (!spacing_given) {
    std::vector<const itk::MetaDataDictionary*> dicts;
    if (const auto* a = reader->GetMetaDataDictionaryArray())
      for (const auto* d : *a) dicts.push_back(d);
    const auto sp = reader->GetOutput()->GetSpacing();
    check_geometry_tags(files, dicts, sp[0], sp[1], sp[2], path, gdcm.notes());
  }
  typename Img::Pointer img = reader->GetOutput();
  // Orientation from the headers: our volumes are axis-aligned with x fastest. Axis flips and
  // permutations are undone exactly (OrientImageFilter to the identity direction, ITK's "RAI");
  // an oblique orientation would need resampling and is refused.
  const auto D = img->GetDirection();
  bool identity = true, permutation = true;
  for (unsigned r = 0; r < 3; ++r) {
    int nonzero = 0;
    for (unsigned c = 0; c < 3; ++c) {
      identity = identity && std::abs(D[r][c] - (r == c ? 1.0 : 0.0)) < 1e-6;
      if (std::abs(D[r][c]) > 1e-6) ++nonzero, permutation = permutation && std::abs(std::abs(D[r][c]) - 1) < 1e-6;
    }
    permutation = permutation && nonzero == 1;
  }
  if (!identity) {
    if (!permutation) {
      std::ostringstream m;
      m << "DICOM input " << path << " has an oblique orientation (direction cosines " << D
        << "); porebench reads axis-aligned volumes only: resample it onto the axes first";
      fail(PB_DICOM_BAD_INPUT, m.str());
    }
    auto orient = itk::OrientImageFilter<Img, Img>::New();
    orient->UseImageDirectionOn();
    orient->SetDesiredCoordinateOrientation(itk::SpatialOrientation::ITK_COORDINATE_ORIENTATION_RAI);
    orient->SetInput(img);
    orient->Update();
    img = orient->GetOutput();
  }
  int64_t dims[3];
  double spacing[3], origin[3];
  for (unsigned i = 0; i < 3; ++i) {
    dims[i] = int64_t(img->GetLargestPossibleRegion().GetSize()[i]);
    spacing[i] = img->GetSpacing()[i];
    origin[i] = img->GetOrigin()[i];
  }
  void* out = host.allocate(host.ctx, type, dims, spacing, origin);
  if (!out) throw Failure{PB_DICOM_HOST, ""};
  std::memcpy(out, img->GetBufferPointer(), size_t(dims[0] * dims[1] * dims[2]) * sizeof(T));
}

}  // namespace

#define PB_EXPORT extern "C" __attribute__((visibility("default")))

PB_EXPORT int pb_dicom_abi(void) { return PB_DICOM_ABI; }
PB_EXPORT const char* pb_dicom_error(void) { return g_error.c_str(); }

PB_EXPORT int pb_dicom_read(const char* path_c, int spacing_given, const pb_dicom_host* host_p) try {
  const std::string path(path_c);
  const pb_dicom_host& host = *host_p;
  CerrCapture gdcm;
  try {
    const std::vector<std::string> files = dicom_files(path);
    auto io = itk::GDCMImageIO::New();
    if (!io->CanReadFile(files.front().c_str())) fail(PB_DICOM_BAD_INPUT, "cannot read " + files.front() + ": not a DICOM file");
    io->SetFileName(files.front());
    io->ReadImageInformation();
    if (io->GetNumberOfComponents() != 1)
      fail(PB_DICOM_BAD_INPUT, "DICOM input " + path + " has " + std::to_string(io->GetNumberOfComponents()) +
                       " components per voxel; expected a scalar (grey-value) image");
    // The voxel type after the header's rescale slope/intercept; types we do not keep are read as float.
    using C = itk::IOComponentEnum;
    switch (io->GetComponentType()) {
      case C::UCHAR: read_dicom_as<uint8_t>(files, path, spacing_given, gdcm, host, PB_DICOM_U8); break;
      case C::USHORT: read_dicom_as<uint16_t>(files, path, spacing_given, gdcm, host, PB_DICOM_U16); break;
      case C::SHORT: read_dicom_as<int16_t>(files, path, spacing_given, gdcm, host, PB_DICOM_I16); break;
      default: read_dicom_as<float>(files, path, spacing_given, gdcm, host, PB_DICOM_F32); break;
    }
  } catch (const itk::ExceptionObject& e) {
    fail(PB_DICOM_BAD_INPUT, "cannot read DICOM input " + path + ": " + e.GetDescription() + gdcm.notes());
  }
  return PB_DICOM_OK;
} catch (const Failure& f) {
  g_error = f.message;
  return f.kind;
} catch (const std::exception& e) {
  g_error = e.what();
  return PB_DICOM_FAILED;
} catch (...) {
  g_error = "unknown error";
  return PB_DICOM_FAILED;
}

