// The datasets of a suite run (see datasets.hpp).
#include "suites/datasets.hpp"

#include <filesystem>
#include <opencv2/core.hpp>

#include "core/error.hpp"
#include "core/histogram.hpp"
#include "core/image_files.hpp"
#include "core/io.hpp"
#include "core/sha256.hpp"
#include "core/text_file.hpp"
#include "methods/registry.hpp"
#include "suites/layout.hpp"
#include "suites/paired.hpp"
#include "synthetic/synth.hpp"

namespace fs = std::filesystem;

namespace pb::suite {

void write_slice_png(const VolumeF& v, int64_t z, double lo, double hi, const std::string& path) {
  cv::Mat src(int(v.ny()), int(v.nx()), CV_32F, const_cast<float*>(v.slice(z)));
  cv::Mat out;
  const double scale = hi > lo ? 255.0 / (hi - lo) : 1.0;
  src.convertTo(out, CV_8U, scale, -lo * scale);
  AtomicOutput a(path);
  if (!image_write(a.tmp_path(), out)) throw InputError("cannot write " + path);
  a.commit();
}

void write_mask_png(const Mask& m, int64_t z, const std::string& path) {
  cv::Mat src(int(m.ny()), int(m.nx()), CV_8U, const_cast<uint8_t*>(m.slice(z)));
  cv::Mat out = src * 255;
  AtomicOutput a(path);
  if (!image_write(a.tmp_path(), out)) throw InputError("cannot write " + path);
  a.commit();
}

namespace {

void prepare_synthetic(Dataset& p, const LogFn& log) {
  const DatasetSpec& d = *p.spec;
  const std::string manifest = p.data_dir + "/manifest.json";
  bool fresh = true;
  if (fs::exists(manifest) && fs::exists(p.data_dir + "/recipe.toml"))
    fresh = read_text_file(p.data_dir + "/recipe.toml", "dataset recipe") != p.recipe_text;
  if (fresh) {
    fs::create_directories(p.data_dir);
    if (log) log("synthesising dataset '" + d.name + "' into " + p.data_dir);
    synth::WriteSynthOptions wo;
    if (log) wo.progress = [&](const std::string& m) { log("synth '" + d.name + "': " + m); };
    synth::write_synth(p.recipe, p.data_dir, wo);
  }
  // The reference for scoring is the exact truth: closed pores (label 2) inside the part.
  if (fresh || !fs::exists(p.ref_mask_path)) {
    const AnyVolume labels = read_volume(p.data_dir + "/truth-labels.mha");
    write_volume(labels.to_mask(2), p.ref_mask_path, {true});
  }
  p.record = {{"name", d.name}, {"kind", "synthetic"}, {"preset", d.preset}, {"recipe", d.recipe},
              {"overrides", d.overrides}, {"data_dir", p.data_dir}, {"reference", "exact truth (closed pores)"},
              {"recipe_sha256", sha256_hex(p.recipe_text.data(), p.recipe_text.size())},
              {"manifest", read_json_file(manifest)}};
}

}  // namespace

Split split_slices(const std::string& name, const Mask* part, const Mask& ref, const Calibration& c) {
  const int64_t nz = ref.nz();
  int64_t z0 = 0, z1 = nz - 1;
  if (part) {
    z0 = nz, z1 = -1;
    for (int64_t z = 0; z < nz; ++z) {
      const uint8_t* s = part->slice(z);
      bool any = false;
      for (int64_t i = 0; i < part->geometry().slice_voxels() && !any; ++i) any = s[i] != 0;
      if (any) z0 = std::min(z0, z), z1 = std::max(z1, z);
    }
    if (z1 < z0) throw InputError("dataset '" + name + "': the part mask is empty");
  }
  Split p;
  const int64_t span = z1 - z0 + 1;
  p.cal_begin = z0;
  p.cal_end = z0 + std::max<int64_t>(1, int64_t(std::lround(c.fraction * double(span))));
  p.test_begin = p.cal_end + c.gap_slices;
  p.test_end = z1 + 1;
  if (p.test_end - p.test_begin < 1)
    throw InputError("dataset '" + name + "': " + std::to_string(span) + " part slices leave no test slices after " +
                     std::to_string(p.cal_end - p.cal_begin) + " calibration slices and a gap of " +
                     std::to_string(c.gap_slices) + "; lower [calibration] fraction or gap_slices");
  // Montages show the test slice with the most reference pore voxels.
  int64_t best = -1;
  p.montage_z = p.test_begin;
  for (int64_t z = p.test_begin; z < p.test_end; ++z) {
    int64_t n = 0;
    const uint8_t* sl = ref.slice(z);
    for (int64_t i = 0; i < ref.geometry().slice_voxels(); ++i) n += sl[i] != 0;
    if (n > best) best = n, p.montage_z = z;
  }
  return p;
}

Dataset describe_dataset(const DatasetSpec& d, const std::string& out_dir) {
  Dataset p;
  p.spec = &d;
  p.name = d.name;
  p.data_dir = (fs::path(out_dir) / "data" / file_token(d.name)).string();
  if (d.kind == DatasetSpec::synthetic) {
    synth::Recipe r = d.preset.empty() ? synth::load_recipe(d.recipe) : synth::preset(d.preset);
    try {
      r = synth::apply_overrides(r, d.overrides);
      synth::validate(r);
    } catch (const InputError& e) {
      throw InputError("dataset '" + d.name + "': " + e.what());
    }
    p.recipe = r;
    p.recipe_text = synth::to_toml(r);
    p.part_mask_path = p.data_dir + "/part-mask.mha";
    p.ref_mask_path = p.data_dir + "/reference-pores.mha";
    const bool dose_series = r.i0.size() > 1;
    for (const auto& s : synth::scan_list(r)) {
      Variant v;
      v.scan = fs::path(s.file_name(dose_series)).stem().string();
      v.path = p.data_dir + "/" + s.file_name(dose_series);
      v.projections = s.projections;
      v.i0 = s.i0;
      v.reference = s.reference;
      v.reference_projections = r.reference_projections;
      v.reference_i0 = r.reference_dose();
      p.variants.push_back(v);
    }
  } else {
    describe_paired(d, p);  // suites/paired.cpp
  }
  for (auto& v : p.variants) {
    if (v.ref_mask_path.empty()) v.ref_mask_path = p.ref_mask_path;
    if (v.part_mask_path.empty()) v.part_mask_path = p.part_mask_path;
  }
  return p;
}

void prepare_dataset(Dataset& p, const Calibration& c, const std::string& out_dir, const LogFn& log) {
  if (p.spec->kind == DatasetSpec::paired) return prepare_paired(p, c, out_dir, log);  // suites/paired.cpp
  prepare_synthetic(p, log);
  const fs::path dir(out_dir);
  const Mask part = p.part_mask_path.empty() ? Mask() : read_volume(p.part_mask_path).to_mask();
  const Mask ref = read_volume(p.ref_mask_path).to_mask();
  const Split sp = split_slices(p.name, part.empty() ? nullptr : &part, ref, c);
  p.cal_begin = sp.cal_begin, p.cal_end = sp.cal_end, p.test_begin = sp.test_begin, p.test_end = sp.test_end;
  p.montage_z = sp.montage_z;
  for (auto& v : p.variants) v.split = sp;
  p.record["slices"] = {{"calibration", {p.cal_begin, p.cal_end}}, {"gap", c.gap_slices},
                        {"test", {p.test_begin, p.test_end}}, {"montage_z", p.montage_z}};
  // Montage backgrounds: the reference and each scan at the montage slice.
  const std::string ref_png = "data/" + file_token(p.name) + "/montage-reference.png";
  write_mask_png(ref, p.montage_z, (dir / ref_png).string());
  p.record["montage_reference_png"] = ref_png;
  Json variants = Json::array();
  for (const auto& v : p.variants) {
    const VolumeF f = read_volume(v.path).to_float();
    const Stats st = compute_stats(f);
    const std::string png = "data/" + file_token(p.name) + "/montage-" + file_token(v.scan) + ".png";
    write_slice_png(f, p.montage_z, st.min, st.max, (dir / png).string());
    variants.push_back({{"scan", v.scan}, {"path", v.path}, {"projections", v.projections}, {"i0", v.i0},
                        {"reference", v.reference}, {"reference_projections", v.reference_projections},
                        {"reference_i0", v.reference_i0}, {"montage_png", png}});
  }
  p.record["variants"] = variants;
  p.prepared = true;
}

}  // namespace pb::suite
