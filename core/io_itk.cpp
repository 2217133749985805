// ITK-backed volume I/O. ITK's ImageIO classes are used directly (no itk::Image pipeline), reading
// straight into our buffer; the IO class is chosen by file name, so no IO factory registration is
// needed. DICOM (and DICONDE) series go through ITK's GDCM reader (GDCMSeriesFileNames orders the
// slices by position, ImageSeriesReader + GDCMImageIO read them with the header geometry).
// This is one of the few translation units that include ITK headers.
#include <itkGDCMImageIO.h>
#include <itkGDCMSeriesFileNames.h>
#include <itkImageIOBase.h>
#include <itkImageSeriesReader.h>
#include <itkOrientImageFilter.h>
#include <itkMetaImageIO.h>
#include <itkNiftiImageIO.h>
#include <itkNrrdImageIO.h>
#include <itkTIFFImageIO.h>

#include <itkMetaDataObject.h>

#include <algorithm>
#include <cstring>
#include <filesystem>
#include <iostream>
#include <map>
#include <regex>
#include <set>
#include <sstream>

#include "core/dicom.hpp"
#include "core/error.hpp"
#include "core/io.hpp"
#include "core/memory.hpp"

namespace fs = std::filesystem;

namespace pb::detail {
namespace {

itk::ImageIOBase::Pointer io_for(const std::string& path) {
  const std::string ext = lower_extension(path);
  if (ext == ".mha" || ext == ".mhd") return itk::MetaImageIO::New().GetPointer();
  if (ext == ".nrrd" || ext == ".nhdr") return itk::NrrdImageIO::New().GetPointer();
  if (ext == ".nii" || ext == ".nii.gz") return itk::NiftiImageIO::New().GetPointer();
  if (ext == ".tif" || ext == ".tiff") return itk::TIFFImageIO::New().GetPointer();
  throw InputError("unsupported file format '" + ext + "' for " + path +
                   " (supported: .mha .mhd .nrrd .nhdr .nii .nii.gz .tif .tiff, a folder of TIFF slices, raw)");
}

VoxelType from_itk(itk::IOComponentEnum c, const std::string& path) {
  using C = itk::IOComponentEnum;
  switch (c) {
    case C::UCHAR: return VoxelType::u8;
    case C::USHORT: return VoxelType::u16;
    case C::SHORT: return VoxelType::i16;
    case C::FLOAT: return VoxelType::f32;
    default:
      throw InputError("unsupported voxel type '" + itk::ImageIOBase::GetComponentTypeAsString(c) + "' in " + path +
                       " (supported: uint8, uint16, int16, float32)");
  }
}

itk::IOComponentEnum to_itk(VoxelType t) {
  using C = itk::IOComponentEnum;
  switch (t) {
    case VoxelType::u8: return C::UCHAR;
    case VoxelType::u16: return C::USHORT;
    case VoxelType::i16: return C::SHORT;
    case VoxelType::f32: return C::FLOAT;
  }
  return C::UNKNOWNCOMPONENTTYPE;
}

template <class T>
AnyVolume alloc(const Geometry& g) { return AnyVolume(Image<T>(g)); }

AnyVolume allocate(VoxelType t, const Geometry& g) {
  switch (t) {
    case VoxelType::u8: return alloc<uint8_t>(g);
    case VoxelType::u16: return alloc<uint16_t>(g);
    case VoxelType::i16: return alloc<int16_t>(g);
    case VoxelType::f32: return alloc<float>(g);
  }
  throw InputError("unsupported voxel type");
}

}  // namespace

AnyVolume itk_read(const std::string& path) {
  auto io = io_for(path);
  try {
    if (!io->CanReadFile(path.c_str()))
      throw InputError("cannot read " + path + ": not a valid " + lower_extension(path) + " file");
    io->SetFileName(path);
    io->ReadImageInformation();
    const unsigned nd = io->GetNumberOfDimensions();
    if (nd < 2 || nd > 3)
      throw InputError("input " + path + " has " + std::to_string(nd) + " dimensions; expected a 2D or 3D image");
    if (io->GetNumberOfComponents() != 1)
      throw InputError("input " + path + " has " + std::to_string(io->GetNumberOfComponents()) +
                       " components per voxel; expected a scalar (grey-value) image");
    Geometry g;
    for (unsigned i = 0; i < 3; ++i) {
      g.dims[i] = i < nd ? int64_t(io->GetDimensions(i)) : 1;
      g.spacing_mm[i] = i < nd ? io->GetSpacing(i) : (nd == 2 ? io->GetSpacing(0) : 1.0);
      g.origin_mm[i] = i < nd ? io->GetOrigin(i) : 0.0;
    }
    const VoxelType type = from_itk(io->GetComponentType(), path);
    for (int i = 0; i < 3; ++i)
      if (g.dims[i] < 1) throw InputError("input " + path + " has dims " + std::to_string(g.dims[i]) + " along " + "xyz"[i]);
    check_memory(saturating_product({uint64_t(g.dims[0]), uint64_t(g.dims[1]), uint64_t(g.dims[2]),
                                     uint64_t(voxel_type_bytes(type))}),
                 "input " + path + " (" + describe(g) + ", " + voxel_type_name(type) + ")");
    AnyVolume v = allocate(type, g);
    itk::ImageIORegion region(nd);
    for (unsigned i = 0; i < nd; ++i) {
      region.SetIndex(i, 0);
      region.SetSize(i, size_t(g.dims[i]));
    }
    io->SetIORegion(region);
    io->Read(v.raw());
    return v;
  } catch (const itk::ExceptionObject& e) {
    throw InputError("cannot read " + path + ": " + e.GetDescription());
  }
}

AnyVolume itk_read_tiff_folder(const std::string& folder) {
  // Slices are ordered by the last number in their file name: slice_0001.tif, slice_0002.tif, ...
  static const std::regex number(R"((\d+)\D*$)");
  std::map<long long, std::string> slices;
  for (const auto& e : fs::directory_iterator(folder)) {
    const std::string ext = lower_extension(e.path().string());
    if (!e.is_regular_file() || (ext != ".tif" && ext != ".tiff")) continue;
    std::string stem = e.path().stem().string();
    std::smatch m;
    if (!std::regex_search(stem, m, number))
      throw InputError("TIFF slice " + e.path().string() + " has no slice number in its name");
    const long long n = std::stoll(m[1]);
    if (!slices.emplace(n, e.path().string()).second)
      throw InputError("TIFF folder " + folder + ": slice number " + std::to_string(n) + " appears twice (" +
                       slices[n] + ", " + e.path().string() + ")");
  }
  if (slices.empty()) throw InputError("folder " + folder + " holds no .tif/.tiff slices");
  AnyVolume out;
  int64_t z = 0;
  for (const auto& [n, file] : slices) {
    AnyVolume s = itk_read(file);
    const Geometry& sg = s.geometry();
    if (sg.dims[2] != 1) throw InputError("TIFF slice " + file + " holds " + std::to_string(sg.dims[2]) + " pages; expected one");
    if (z == 0) {
      Geometry g = sg;
      g.dims[2] = int64_t(slices.size());
      g.spacing_mm[2] = sg.spacing_mm[0];
      check_memory(saturating_product({uint64_t(g.dims[0]), uint64_t(g.dims[1]), uint64_t(g.dims[2]),
                                       uint64_t(voxel_type_bytes(s.type()))}),
                   "TIFF folder " + folder + " (" + describe(g) + ")");
      out = allocate(s.type(), g);
    } else {
      if (s.type() != out.type())
        throw InputError("TIFF slice " + file + " has voxel type " + voxel_type_name(s.type()) + ", the first slice " +
                         voxel_type_name(out.type()));
      if (sg.dims[0] != out.geometry().dims[0] || sg.dims[1] != out.geometry().dims[1])
        throw InputError("TIFF slice " + file + " is " + std::to_string(sg.dims[0]) + " x " + std::to_string(sg.dims[1]) +
                         ", the first slice " + std::to_string(out.geometry().dims[0]) + " x " +
                         std::to_string(out.geometry().dims[1]));
    }
    std::memcpy(static_cast<char*>(out.raw()) + size_t(z) * s.bytes(), s.raw(), s.bytes());
    ++z;
  }
  return out;
}

namespace {

// The files of a DICOM path: one file, or the one series of a folder ordered by slice position.
std::vector<std::string> dicom_files(const std::string& path) {
  if (!fs::is_directory(path)) return {path};
  auto names = itk::GDCMSeriesFileNames::New();
  names->SetUseSeriesDetails(false);
  names->SetDirectory(path);
  const auto& uids = names->GetSeriesUIDs();
  if (uids.empty()) throw InputError("DICOM folder " + path + " holds no readable DICOM series");
  if (uids.size() > 1) {
    std::string list;
    for (const auto& u : uids) list += (list.empty() ? "" : ", ") + u;
    throw InputError("DICOM folder " + path + " holds " + std::to_string(uids.size()) + " series (" + list +
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
// frame spacing. `dicts[i]` is the header of `files[i]`; `x_mm`, `y_mm` the in-plane spacing GDCM
// read. An in-plane tag counts only when GDCM took it: it picks the tag by the object's class
// (e.g. Nominal Scanned Pixel Spacing for a Secondary Capture) and reads 1 mm when that one is missing.
void check_geometry_tags(const std::vector<std::string>& files, const std::vector<const itk::MetaDataDictionary*>& dicts,
                         double x_mm, double y_mm, const std::string& path, const std::string& notes) {
  auto refuse = [&](const std::string& file, const std::string& tag, const std::string& what) {
    throw DicomGeometryMissing((file == path ? "DICOM file " + path : "DICOM input " + path + ": " + file) + " has no " + tag + ", so its " + what +
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
  }
}

template <class T>
AnyVolume read_dicom_as(const std::vector<std::string>& files, const std::string& path, bool spacing_given,
                        const CerrCapture& gdcm) {
  using Img = itk::Image<T, 3>;
  auto reader = itk::ImageSeriesReader<Img>::New();
  reader->SetImageIO(itk::GDCMImageIO::New());
  reader->SetFileNames(files);
  reader->UpdateOutputInformation();
  const auto size = reader->GetOutput()->GetLargestPossibleRegion().GetSize();
  // ITK's buffer and ours: twice the volume while it is copied.
  check_memory(saturating_product({uint64_t(size[0]), uint64_t(size[1]), uint64_t(size[2]), uint64_t(2 * sizeof(T))}),
               "DICOM input " + path + " (" + std::to_string(size[0]) + " x " + std::to_string(size[1]) + " x " +
                   std::to_string(size[2]) + ")");
  reader->Update();
  if (!spacing_given) {
    std::vector<const itk::MetaDataDictionary*> dicts;
    if (const auto* a = reader->GetMetaDataDictionaryArray())
      for (const auto* d : *a) dicts.push_back(d);
    const auto sp = reader->GetOutput()->GetSpacing();
    check_geometry_tags(files, dicts, sp[0], sp[1], path, gdcm.notes());
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
      throw InputError(m.str());
    }
    auto orient = itk::OrientImageFilter<Img, Img>::New();
    orient->UseImageDirectionOn();
    orient->SetDesiredCoordinateOrientation(itk::SpatialOrientation::ITK_COORDINATE_ORIENTATION_RAI);
    orient->SetInput(img);
    orient->Update();
    img = orient->GetOutput();
  }
  Geometry g;
  for (unsigned i = 0; i < 3; ++i) {
    g.dims[i] = int64_t(img->GetLargestPossibleRegion().GetSize()[i]);
    g.spacing_mm[i] = img->GetSpacing()[i];
    g.origin_mm[i] = img->GetOrigin()[i];
  }
  Image<T> out(g, Uninitialized{});
  std::memcpy(out.data(), img->GetBufferPointer(), size_t(g.voxels()) * sizeof(T));
  return AnyVolume(std::move(out));
}

}  // namespace

AnyVolume itk_read_dicom(const std::string& path) { return itk_read_dicom(path, false); }

AnyVolume itk_read_dicom(const std::string& path, bool spacing_given) {
  CerrCapture gdcm;
  try {
    const std::vector<std::string> files = dicom_files(path);
    auto io = itk::GDCMImageIO::New();
    if (!io->CanReadFile(files.front().c_str())) throw InputError("cannot read " + files.front() + ": not a DICOM file");
    io->SetFileName(files.front());
    io->ReadImageInformation();
    if (io->GetNumberOfComponents() != 1)
      throw InputError("DICOM input " + path + " has " + std::to_string(io->GetNumberOfComponents()) +
                       " components per voxel; expected a scalar (grey-value) image");
    // The voxel type after the header's rescale slope/intercept; types we do not keep are read as float.
    using C = itk::IOComponentEnum;
    switch (io->GetComponentType()) {
      case C::UCHAR: return read_dicom_as<uint8_t>(files, path, spacing_given, gdcm);
      case C::USHORT: return read_dicom_as<uint16_t>(files, path, spacing_given, gdcm);
      case C::SHORT: return read_dicom_as<int16_t>(files, path, spacing_given, gdcm);
      default: return read_dicom_as<float>(files, path, spacing_given, gdcm);
    }
  } catch (const itk::ExceptionObject& e) {
    throw InputError("cannot read DICOM input " + path + ": " + e.GetDescription() + gdcm.notes());
  }
}

void itk_write(const void* data, VoxelType type, const Geometry& g, const std::string& path, bool compress) {
  auto io = io_for(path);
  try {
    io->SetNumberOfDimensions(3);
    for (unsigned i = 0; i < 3; ++i) {
      io->SetDimensions(i, unsigned(g.dims[i]));
      io->SetSpacing(i, g.spacing_mm[i]);
      io->SetOrigin(i, g.origin_mm[i]);
      std::vector<double> axis(3, 0.0);
      axis[i] = 1.0;
      io->SetDirection(i, axis);
    }
    io->SetPixelType(itk::IOPixelEnum::SCALAR);
    io->SetComponentType(to_itk(type));
    io->SetNumberOfComponents(1);
    io->SetUseCompression(compress);
    io->SetFileName(path);
    itk::ImageIORegion region(3);
    for (unsigned i = 0; i < 3; ++i) {
      region.SetIndex(i, 0);
      region.SetSize(i, size_t(g.dims[i]));
    }
    io->SetIORegion(region);
    io->WriteImageInformation();
    io->Write(data);
  } catch (const itk::ExceptionObject& e) {
    throw InputError("cannot write " + path + ": " + e.GetDescription());
  }
}

}  // namespace pb::detail

#include <itkConfigure.h>
namespace pb {
std::string itk_version() { return ITK_VERSION_STRING; }
}  // namespace pb
