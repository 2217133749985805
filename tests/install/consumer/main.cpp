// Uses the installed library: scores two 4^3 cubes one voxel apart along x, whose Jaccard index is
// 48/80 = 0.6 (intersection 3 x 4 x 4, union 5 x 4 x 4: analytic), and finds a method registered in
// libporebench (Otsu). Exit 0 when both hold.
#include <iostream>

#include "methods/registry.hpp"
#include "metrics/score.hpp"

int main() {
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
