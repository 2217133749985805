// porebench segment METHOD INPUT -o OUT: one method on one volume; writes the pore mask (uint8,
// 1 = pore) and optionally a JSON record of what the method chose.
#include <cmath>
#include <filesystem>
#include <iostream>
#include <memory>
#include <optional>

#include "apps/cli.hpp"
#include "core/error.hpp"
#include "core/histogram.hpp"
#include "core/io_atomic.hpp"
#include "core/json.hpp"
#include "core/sha256.hpp"
#include "core/slabs.hpp"
#include "methods/pores.hpp"
#include "methods/registry.hpp"
#include "methods/segment_record.hpp"
#include "methods/streaming.hpp"

namespace pb::cli {
namespace {

void print_summary(const MethodInfo& m, const MethodOutput& out, int64_t pore_voxels, const std::string& output,
                   const std::string& json) {
  for (const auto& w : out.warnings) log("porebench: warning: " + w);
  const double porosity = out.part_voxels > 0 ? 100.0 * double(pore_voxels) / double(out.part_voxels) : NAN;
  std::cout << m.name << ": ";
  for (const auto& [k, v] : out.chosen) std::cout << k << " " << v << "  ";
  std::cout << "pores " << pore_voxels << " voxels of " << out.part_voxels << " part voxels, porosity " << porosity
            << " %, " << out.runtime_s << " s\n"
            << "wrote " << output << (json.empty() ? "" : " and " + json) << '\n';
}

struct Args {
  std::string method, input, output, roi, json, probability, memory_limit;
  int64_t slab_slices = 0;
  std::vector<std::string> sets;
  bool allow_nan = false, compress = false;
  ReadArgs read;
};

void add_segment_options(CLI::App& app, Args& a) {
  app.add_option("METHOD", a.method, "method name (see 'porebench methods')")->required();
  app.add_option("INPUT", a.input, "grey-value volume")->required();
  app.add_option("-o,--output", a.output, "pore mask to write: .mha, .nrrd, .nii or .nii.gz (they keep the spacing), or .npy (no spacing)")->required();
  app.add_option("--set", a.sets, "method parameter key=value (repeatable)");
  app.add_option("--roi", a.roi, "part mask: only voxels inside (non-zero) are classified");
  app.add_option("--json", a.json, "write what the method chose, its runtime and counts as JSON");
  app.add_option("--save-probability", a.probability, "write the pore-probability map (float32; neural methods)");
  app.add_flag("--allow-nan", a.allow_nan, "same as --allow-nonfinite (kept for old scripts)");
  app.add_flag("--compress", a.compress, "compress the output mask");
  app.add_option("--memory-limit", a.memory_limit,
                 "memory for the volume (bytes, or e.g. 12G): above it the volume is read and segmented by slabs, or "
                 "refused when the input or method cannot be (default: half the machine's memory)");
  app.add_option("--slab-slices", a.slab_slices, "slices per slab when segmenting by slabs (default: about 16 MiB of float voxels, at least 2 slices; "
                 "raised to twice the halo a window filter reads, bernsen and local-gaussian: window/2)")
      ->check(CLI::Range(int64_t(1), int64_t(1) << 40));
  a.read.add_to(&app);
}

// Everything about the outputs that can be checked before any work.
void check_outputs(const Args& a, const MethodInfo& m) {
  check_volume_output(a.output);
  if (!a.json.empty()) check_writable(a.json);
  if (!a.probability.empty()) {
    if (m.family != "neural" && m.family != "predictions")
      throw InputError("--save-probability " + a.probability + ": method " + m.name + " (family " + m.family +
                       ") makes no probability map; neural methods and predictions of kind probability do");
    check_volume_output(a.probability);
  }
  if (!a.json.empty() && std::filesystem::absolute(a.json) == std::filesystem::absolute(a.output))
    throw InputError("--json " + a.json + " is the same file as -o " + a.output);
}

// Above the memory limit: read, segmented and written by slabs; the JSON record (if asked) is
// renamed after the mask, as in memory.
void segment_file_by_slabs(const Args& a, const MethodInfo& m, const ParamValues& params, const ReadOptions& ro) {
  if (a.compress) throw InputError("--compress: a mask written by slabs is uncompressed (" + a.output + ")");
  check_slab_output(a.output, "-o");
  const SlabFile in(a.input, ro);
  std::optional<SlabFile> roi;  // checked by segment_by_slabs before any work (dims, not empty)
  if (!a.roi.empty()) roi.emplace(a.roi, ReadOptions{});
  MethodOutput out;
  // Both or neither, as in memory: the JSON (with the input's SHA-256, one more pass over the file)
  // goes to its temporary once the mask is written and before it is renamed; the JSON is renamed
  // after it.
  std::optional<AtomicOutput> json_out;
  std::string json_text;
  SlabSegmentOptions so;
  so.slab_slices = a.slab_slices;
  if (roi) so.roi = &*roi;
  so.before_commit = [&](const SlabSegmentResult& r) {
    out.chosen = r.chosen, out.warnings = r.warnings, out.part_voxels = r.part_voxels, out.runtime_s = r.runtime_s;
    if (a.json.empty()) return;
    SegmentRecordInputs io{a.input, in.sha256(), std::nullopt, a.output};
    if (!a.roi.empty()) io.roi = a.roi;
    json_text = segment_record(m, params, out, in.geometry().voxels(), io, r.pore_voxels).dump(2) + "\n";
    json_out.emplace(a.json);
    write_text_to(*json_out, json_text);
  };
  const SlabSegmentResult r = segment_by_slabs(a.method, params, in, a.output, so);
  if (json_out) json_out->commit(json_text.size());
  if (!r.slab_note.empty()) log("porebench: " + r.slab_note);
  log("porebench: " + a.input + " segmented by slabs of " + std::to_string(r.slab_slices) + " slices (above --memory-limit)");
  print_summary(m, out, r.pore_voxels, a.output, a.json);
}

// In memory: the part mask first (small: an empty or mismatched one is known before any work), the
// volume as float, the method, then the outputs (both or neither).
void segment_in_memory(const Args& a, const MethodInfo& m, const ParamValues& params, const ReadOptions& ro) {
  Mask roi;
  if (!a.roi.empty()) {
    roi = read_volume(a.roi).to_mask();
    if (count_nonzero(roi) == 0)
      throw InputError("ROI " + a.roi + " is empty: it has no non-zero voxel, so no voxel would be classified");
  }

  AnyVolume raw = read_volume(a.input, ro);
  const Geometry geometry = raw.geometry();
  const VoxelType stored_type = raw.type();
  const std::string input_sha = a.json.empty() ? std::string() : sha256_hex(raw.raw(), raw.bytes());
  VolumeF vol = raw.to_float();
  raw = AnyVolume();  // the float copy is all that is needed from here on
  if (!a.roi.empty()) check_same_geometry(geometry, a.input, roi.geometry(), a.roi);
  MethodInput in{vol, a.roi.empty() ? nullptr : &roi, stored_type};
  MethodOutput out = run_method(m, params, in);

  const int64_t pore_voxels = count_nonzero(out.pores);
  WriteOptions wo;
  wo.compress = a.compress;
  // The JSON is rendered before the mask is written, so that both are written or neither is.
  std::string json_text;
  if (!a.json.empty()) {
    SegmentRecordInputs io{a.input, input_sha, std::nullopt, a.output};
    if (!a.roi.empty()) io.roi = a.roi;
    json_text = segment_record(m, params, out, vol.size(), io).dump(2) + "\n";
  }
  // Both or neither: the JSON goes to its temporary first, the mask is written (and committed),
  // then the JSON is renamed; a failure before that removes the JSON temporary.
  std::optional<AtomicOutput> json_out;
  if (!json_text.empty()) {
    json_out.emplace(a.json);
    write_text_to(*json_out, json_text);
  }
  if (!a.probability.empty() && out.probability.empty())
    throw InputError("--save-probability " + a.probability + ": method " + m.name + " made no probability map here");
  if (!a.probability.empty()) write_volume(out.probability, a.probability, wo);
  write_volume(out.pores, a.output, wo);
  if (json_out) json_out->commit(json_text.size());
  print_summary(m, out, pore_voxels, a.output, a.json);
}

Action setup_segment(CLI::App& app) {
  app.description("segment the pores of one volume with one method");
  auto a = std::make_shared<Args>();
  add_segment_options(app, *a);
  return [a] {
    // Validate everything that can be validated before any work.
    const MethodInfo& m = Registry::instance().get(a->method);
    const ParamValues params = parse_params(m, a->sets);
    check_outputs(*a, m);
    ReadOptions ro = a->read.options(a->input);
    ro.allow_nonfinite = ro.allow_nonfinite || a->allow_nan;
    const uint64_t limit = a->memory_limit.empty() ? default_memory_limit() : parse_memory_limit(a->memory_limit, "--memory-limit");
    if (plan_segment(a->input, ro, a->method, a->roi, limit).by_slabs)
      segment_file_by_slabs(*a, m, params, ro);
    else
      segment_in_memory(*a, m, params, ro);
    return 0;
  };
}

}  // namespace

PB_REGISTER_COMMAND("segment", 40, setup_segment);

}  // namespace pb::cli
