// porebench consensus MASK MASK [MASK...] -o OUT: a consensus reference from several pore masks of
// the same scan (e.g. several methods on the high-quality scan) by STAPLE (metrics/staple.hpp), so
// that no single method's habits become the reference. --json records each mask's estimated
// sensitivity and specificity, the prior, the iterations and the input hashes.
#include <iostream>
#include <memory>

#include "apps/cli.hpp"
#include "core/context.hpp"
#include "core/error.hpp"
#include "core/json.hpp"
#include "core/sha256.hpp"
#include "metrics/staple.hpp"

namespace pb::cli {
namespace {

Action setup_consensus(CLI::App& app) {
  app.description("consensus reference mask from several pore masks of one scan (STAPLE)");
  struct Args {
    std::vector<std::string> masks;
    std::string out, json;
    double threshold = 0.5;
    int64_t pore_label = -1;
    int max_iterations = 200;
  };
  auto a = std::make_shared<Args>();
  app.add_option("masks", a->masks, "pore masks of one scan (non-zero = pore, or see --pore-label); two or more")
      ->required();
  app.add_option("-o,--output", a->out, "consensus mask to write: .mha, .nrrd, .nii or .nii.gz (they keep the spacing), or .npy (no spacing)")->required();
  app.add_option("--json", a->json, "write each mask's sensitivity and specificity as JSON");
  app.add_option("--threshold", a->threshold, "consensus where the STAPLE probability is >= this")->capture_default_str();
  app.add_option("--pore-label", a->pore_label, "masks are label volumes: pores are voxels equal to N");
  app.add_option("--max-iterations", a->max_iterations, "EM iterations at most")->capture_default_str();
  return [a] {
    if (a->masks.size() < 2)
      throw InputError("consensus needs two or more masks, got " + std::to_string(a->masks.size()));
    if (a->max_iterations < 1)
      throw InputError("--max-iterations must be >= 1, got " + std::to_string(a->max_iterations));
    if (a->pore_label < -1) throw InputError("--pore-label must be >= 0, got " + std::to_string(a->pore_label));
    check_writable(a->out);
    if (!a->json.empty()) check_writable(a->json);
    std::vector<Mask> masks;
    nlohmann::ordered_json inputs = nlohmann::ordered_json::array();
    for (const auto& path : a->masks) {
      const AnyVolume v = read_volume(path);
      if (!masks.empty()) check_same_geometry(v.geometry(), path, masks[0].geometry(), a->masks[0]);
      inputs.push_back({{"path", path}, {"sha256_voxels", sha256_hex(v.raw(), v.bytes())}});
      masks.push_back(v.to_mask(a->pore_label));
    }
    std::vector<const Mask*> ptrs;
    for (const auto& m : masks) ptrs.push_back(&m);
    const StapleResult r = staple(ptrs, a->masks, a->threshold, a->max_iterations);
    if (!r.converged)
      throw InputError("STAPLE did not converge in " + std::to_string(a->max_iterations) +
                       " iterations (--max-iterations); no consensus written");
    nlohmann::ordered_json j;
    if (!a->json.empty()) {
      j["context"] = run_context();
      j["command"] = "consensus";
      j["method"] = "STAPLE (Warfield, Zou & Wells 2004, IEEE TMI 23(7):903-921), ITK STAPLEImageFilter";
      j["threshold"] = a->threshold;
      j["prior"] = r.prior;
      j["iterations"] = r.iterations;
      j["consensus_voxels"] = r.consensus_voxels;
      for (size_t i = 0; i < inputs.size(); ++i) {
        inputs[i]["sensitivity"] = r.sensitivity[i];
        inputs[i]["specificity"] = r.specificity[i];
      }
      j["inputs"] = inputs;
    }
    write_volume(r.consensus, a->out);
    if (!a->json.empty()) write_text_atomic(a->json, j.dump(2) + "\n");
    std::cout << "STAPLE: " << r.iterations << " iterations, prior " << r.prior << ", consensus "
              << r.consensus_voxels << " voxels\n";
    for (size_t i = 0; i < a->masks.size(); ++i)
      std::cout << "  " << a->masks[i] << ": sensitivity " << r.sensitivity[i] << "  specificity "
                << r.specificity[i] << '\n';
    std::cout << "wrote " << a->out << (a->json.empty() ? "" : " " + a->json) << '\n';
    return 0;
  };
}

}  // namespace

PB_REGISTER_COMMAND("consensus", 55, setup_consensus);

}  // namespace pb::cli
