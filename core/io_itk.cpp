// ITK-backed volume I/O. ITK's ImageIO classes are used directly (no itk::Image pipeline), reading
// straight into our buffer; the IO class is chosen by file name, so no IO factory registration is
// needed. DICOM (and DICONDE) series go through ITK's GDCM reader in the module
// libporebench_dicom.so (core/dicom_module/module.cpp), opened here on the first DICOM input: GDCM
// costs ~45 ms of CPU when it is loaded (issue 16).
// This is one of the few translation units that include ITK headers.
#include <itkImageIOBase.h>
#include <itkMetaImageIO.h>
#include <itkNiftiImageIO.h>
#include <itkNrrdImageIO.h>
#include <itkTIFFImageIO.h>

#include <algorithm>
#include <cstring>
#include <exception>
#include <filesystem>
#include <map>
#include <regex>

#include "core/dicom.hpp"
#include "core/dicom_module/dicom_abi.h"
#include "core/error.hpp"
#include "core/io.hpp"
#include "core/memory.hpp"
#include "core/modules.hpp"

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

// The DICOM module's entry points, opened once (a failed open throws, naming the paths tried, and
// is tried again on the next DICOM input).
struct DicomApi {
  decltype(&pb_dicom_read) read = nullptr;
  decltype(&pb_dicom_error) error = nullptr;
};

const DicomApi& dicom_api() {
  static const DicomApi api = [] {
    const std::string file = "libporebench_dicom.so";
    void* h = open_module(file, PB_DICOM_MODULE_DIR, "DICOM reader");
    const auto abi = reinterpret_cast<decltype(&pb_dicom_abi)>(module_symbol(h, "pb_dicom_abi", file));
    if (abi() != PB_DICOM_ABI)
      throw std::runtime_error("module " + file + " has entry points of version " + std::to_string(abi()) +
                               ", this library expects " + std::to_string(PB_DICOM_ABI));
    DicomApi a;
    a.read = reinterpret_cast<decltype(&pb_dicom_read)>(module_symbol(h, "pb_dicom_read", file));
    a.error = reinterpret_cast<decltype(&pb_dicom_error)>(module_symbol(h, "pb_dicom_error", file));
    return a;
  }();
  return api;
}

// The host side of the module's callbacks: our memory check and our volume; an exception of ours
// is kept here and rethrown after the module has returned (none crosses the module).
struct DicomSink {
  AnyVolume volume;
  std::exception_ptr refusal;
};

int dicom_check_memory(void* ctx, const uint64_t size[3], uint64_t bytes_per_voxel, const char* what) {
  try {
    check_memory(saturating_product({size[0], size[1], size[2], bytes_per_voxel}), what);
    return 0;
  } catch (...) {
    static_cast<DicomSink*>(ctx)->refusal = std::current_exception();
    return 1;
  }
}

void* dicom_allocate(void* ctx, int type, const int64_t dims[3], const double spacing_mm[3], const double origin_mm[3]) {
  auto& sink = *static_cast<DicomSink*>(ctx);
  try {
    Geometry g;
    for (int i = 0; i < 3; ++i) g.dims[i] = dims[i], g.spacing_mm[i] = spacing_mm[i], g.origin_mm[i] = origin_mm[i];
    switch (type) {
      case PB_DICOM_U8: sink.volume = Image<uint8_t>(g, Uninitialized{}); break;
      case PB_DICOM_U16: sink.volume = Image<uint16_t>(g, Uninitialized{}); break;
      case PB_DICOM_I16: sink.volume = Image<int16_t>(g, Uninitialized{}); break;
      default: sink.volume = Image<float>(g, Uninitialized{}); break;
    }
    return sink.volume.raw();
  } catch (...) {
    sink.refusal = std::current_exception();
    return nullptr;
  }
}

}  // namespace

AnyVolume itk_read_dicom(const std::string& path) { return itk_read_dicom(path, false); }

AnyVolume itk_read_dicom(const std::string& path, bool spacing_given) {
  const DicomApi& api = dicom_api();
  DicomSink sink;
  const pb_dicom_host host{&sink, dicom_check_memory, dicom_allocate};
  switch (api.read(path.c_str(), spacing_given ? 1 : 0, &host)) {
    case PB_DICOM_OK: return std::move(sink.volume);
    case PB_DICOM_BAD_INPUT: throw InputError(api.error());
    case PB_DICOM_NO_GEOMETRY: throw DicomGeometryMissing(api.error());
    case PB_DICOM_HOST:
      if (sink.refusal) std::rethrow_exception(sink.refusal);
      throw std::runtime_error("the DICOM reader stopped without a reason for " + path);
    default: throw std::runtime_error(std::string("the DICOM reader failed on ") + path + ": " + api.error());
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
