// porebench convert IN -o OUT: brings a scan into a format that keeps its geometry, or into NumPy's
// .npy for machine-learning tools. Reads what read_volume reads (MetaImage, NRRD, NIfTI, TIFF files
// and folders of TIFF slices, DICOM/DICONDE series folders and files, .npy, raw with --raw-*);
// writes formats that store the spacing (.mha, .nrrd, .nii/.nii.gz) and .npy, which stores none:
// the spacing it drops is printed, to be given again (--spacing, spacing_mm) when the file is read.
// TIFF, .npy and raw inputs carry no trustworthy voxel size: --spacing is required for them.
#include <filesystem>
#include <iostream>
#include <memory>

#include "apps/cli.hpp"
#include "core/error.hpp"
#include "core/format.hpp"

namespace pb::cli {
namespace {

Action setup_convert(CLI::App& app) {
  app.description("convert a volume (raw, TIFF file or folder, DICOM series folder or file, MetaImage, NRRD, NIfTI, "
                  ".npy) to .mha, .nrrd, .nii(.gz) or .npy (NumPy: no voxel size stored)");
  struct Args {
    std::string input, output;
    bool compress = false;
    ReadArgs read;
  };
  auto a = std::make_shared<Args>();
  app.add_option("IN", a->input, "volume file, folder of TIFF slices or DICOM series folder")->required();
  app.add_option("-o,--output", a->output,
                 "file to write: .mha, .nrrd, .nii or .nii.gz (they keep the spacing), or .npy (C order, shape z, y, x; "
                 "stores no spacing: it is printed)")
      ->required();
  app.add_flag("--compress", a->compress, "zlib compression (MetaImage, NRRD)");
  a->read.add_to(&app);
  return [a] {
    const std::string ext = lower_extension(a->output);
    const bool npy = ext == ".npy";
    if (ext != ".mha" && ext != ".nrrd" && ext != ".nii" && ext != ".nii.gz" && !npy)
      throw InputError("convert -o " + a->output + ": format '" + ext +
                       "' is not written; use .mha, .nrrd, .nii or .nii.gz (they keep the voxel size) or .npy");
    if (npy && a->compress)
      throw InputError("convert -o " + a->output + ": --compress is for .mha and .nrrd; .npy is written uncompressed");
    const ReadOptions ro = a->read.options(a->input);
    if (!ro.spacing_mm && !ro.raw && spacing_unknown(a->input))
      throw InputError("convert " + a->input + ": this format stores no reliable voxel size (z spacing of TIFF, .npy, raw); " +
                       "give --spacing X,Y,Z in mm");
    check_writable(a->output);
    const AnyVolume v = read_volume(a->input, ro);
    WriteOptions wo;
    wo.compress = a->compress;
    write_volume(v, a->output, wo);
    std::cout << "wrote " << a->output << ": " << describe(v.geometry()) << ", " << voxel_type_name(v.type()) << '\n';
    if (npy) {
      const auto& s = v.geometry().spacing_mm;
      std::cout << "note: .npy stores no voxel size; give --spacing " << format_number(s[0], 10) << ',' << format_number(s[1], 10)
                << ',' << format_number(s[2], 10) << " (spacing_mm in a suite file) when it is read\n";
    }
    return 0;
  };
}

}  // namespace

PB_REGISTER_COMMAND("convert", 35, setup_convert);

}  // namespace pb::cli
