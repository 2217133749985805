// porebench convert IN -o OUT: brings a scan into a format that keeps its geometry. Reads what
// read_volume reads (MetaImage, NRRD, NIfTI, TIFF files and folders of TIFF slices, DICOM/DICONDE
// series folders and files, raw with --raw-*); writes only formats that store the spacing (.mha/.mhd, .nrrd/.nhdr, .nii/.nii.gz).
// TIFF, .npy and raw inputs carry no trustworthy voxel size: --spacing is required for them.
#include <filesystem>
#include <iostream>
#include <memory>

#include "apps/cli.hpp"
#include "core/error.hpp"

namespace pb::cli {
namespace {

Action setup_convert(CLI::App& app) {
  app.description("convert a volume (raw, TIFF file or folder, DICOM series folder or file, MetaImage, NRRD, NIfTI) "
                  "to .mha, .nrrd or .nii(.gz)");
  struct Args {
    std::string input, output;
    bool compress = false;
    ReadArgs read;
  };
  auto a = std::make_shared<Args>();
  app.add_option("IN", a->input, "volume file, folder of TIFF slices or DICOM series folder")->required();
  app.add_option("-o,--output", a->output, "file to write: .mha/.mhd, .nrrd/.nhdr or .nii/.nii.gz (they keep the spacing)")
      ->required();
  app.add_flag("--compress", a->compress, "zlib compression (MetaImage, NRRD)");
  a->read.add_to(&app);
  return [a] {
    const std::string ext = lower_extension(a->output);
    if (ext != ".mha" && ext != ".mhd" && ext != ".nrrd" && ext != ".nhdr" && ext != ".nii" && ext != ".nii.gz")
      throw InputError("convert -o " + a->output + ": format '" + ext +
                       "' is not written (it would lose the voxel size); use .mha, .mhd, .nrrd, .nhdr, .nii or .nii.gz");
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
    return 0;
  };
}

}  // namespace

PB_REGISTER_COMMAND("convert", 35, setup_convert);

}  // namespace pb::cli
