// Uses the installed library: scores two 4^3 cubes one voxel apart along x, whose Jaccard index is
// 48/80 = 0.6 (intersection 3 x 4 x 4, union 5 x 4 x 4: analytic), and finds a method registered in
// libporebench (Otsu). Exit 0 when both hold.
// `consumer torch`: opens a TorchScript engine on a file that is not a model, which opens the
// LibTorch module first (PREFIX/lib/porebench, found from libporebench.so's own folder): prints
// the error and exits 0 when LibTorch itself refused the file, 1 for any other error (e.g. the
// module not found, whose message names every path tried).
#include <iostream>
#include <string>

#include "core/error.hpp"
#include "methods/neural.hpp"
#include "methods/registry.hpp"
#include "metrics/score.hpp"

int main(int argc, char** argv) {
  if (argc > 1 && std::string(argv[1]) == "torch") {
    pb::ModelCard c;
    c.card_path = "probe/card.json";
    c.file = "not-a-model.pt";
    c.model_path = argv[0];  // this program: a file, but no TorchScript
    try {
      pb::open_torch_engine(c, 1);
    } catch (const pb::InputError& e) {
      std::cout << e.what() << '\n';
      return std::string(e.what()).find("LibTorch cannot load") != std::string::npos ? 0 : 1;
    } catch (const std::exception& e) {
      std::cout << e.what() << '\n';
      return 1;
    }
    return 1;
  }
  pb::Geometry g;
  g.dims = {10, 8, 8};
  pb::Mask ref(g, 0), pred(g, 0);
  for (int z = 2; z < 6; ++z)
    for (int y = 2; y < 6; ++y)
      for (int x = 2; x < 6; ++x) ref(x, y, z) = 1, pred(x + 1, y, z) = 1;
  const pb::ScoreResult r = pb::score(pred, ref, nullptr, pb::ScoreOptions{});
  const pb::MethodInfo& otsu = pb::Registry::instance().get("otsu");
  std::cout << "jaccard " << r.overlap.jaccard << ", method " << otsu.name << " (" << otsu.family << ")\n";
  return r.overlap.jaccard == 0.6 && otsu.name == "otsu" ? 0 : 1;
}
