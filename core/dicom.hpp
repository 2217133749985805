#pragma once
// DICOM (and DICONDE) input details that core/io.cpp, the paired-suite preflight and the tests
// need beyond core/io.hpp; implemented in core/io_itk.cpp.
//
// A DICOM input states its voxel size only through its tags (names and numbers as DICOM PS3.6):
// in-plane by Pixel Spacing (0028,0030), Imager Pixel Spacing (0018,1164) or Nominal Scanned Pixel
// Spacing (0018,2010); between the slices of a series folder by each file's Image Position
// (Patient) (0020,0032); in a multi-frame file by Spacing Between Slices (0018,0088) or the
// per-frame functional groups (5200,9230); in a single slice by Spacing Between Slices alone. Where
// they are missing GDCM reads 1 mm without a word;
// porebench refuses the input (DicomGeometryMissing, exit 2, naming the file and the tag) unless
// the voxel size is given (spacing_mm in a suite file, --spacing on the command line).
// GDCM's and ITK's own warnings (written to std::cerr by those libraries) are captured while a
// DICOM input is read: not printed, and quoted in the message when the input is refused.
#include <string>

#include "core/error.hpp"
#include "core/volume.hpp"

namespace pb {

struct DicomGeometryMissing : InputError {
  using InputError::InputError;
};

namespace detail {
// A DICOM series folder or one DICOM file. `spacing_given`: the caller sets the voxel size, so
// missing geometry tags are not refused.
AnyVolume itk_read_dicom(const std::string& path, bool spacing_given);
}  // namespace detail

}  // namespace pb
