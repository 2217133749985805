#pragma once
// A porous phantom: the analytic description (part primitives, marker spheres, pore list) kept
// apart from its rasterisation on the voxel grid and from any simulated acquisition.
// Pores are ellipsoids with a rotation about z only (yaw); gas pores are spheres; an irregular
// lack-of-fusion void is a union of flat ellipsoids in one layer plane (lobes). Phantom frame:
// mm, origin at the volume centre, z = part axis = rotation axis = build direction.
// Truth labels: 0 background (air, open pores, markers), 1 material, 2 closed pore.
#include <array>
#include <cmath>
#include <random>
#include <string>
#include <vector>

#include "core/volume.hpp"
#include "synthetic/recipe.hpp"

namespace pb::synth {

using Vec3 = std::array<double, 3>;

// A flat ellipsoid of an irregular void, in the pore's layer plane (z = centre_mm[2]) with the
// pore's thickness semi-axis semi_axes_mm[2].
struct Lobe {
  double dx_mm = 0, dy_mm = 0;  // centre offset from the pore centre, phantom frame
  double a_mm = 0, b_mm = 0;    // in-plane semi-axes, along the lobe's own x, y (after yaw)
  double yaw_rad = 0;
};

struct Pore {
  int id = 0;                    // 1-based, in placement order
  int population = 0;            // index into Recipe::pores
  std::string type;              // gas, lack-of-fusion, cluster
  Vec3 centre_mm{0, 0, 0};
  Vec3 semi_axes_mm{0, 0, 0};    // along the pore's own x, y (after yaw) and z
  double yaw_rad = 0;            // rotation about z
  bool open = false;             // cut by the part surface (air connected to the outside)
  // Irregular void: the lobes unioned with the ellipsoid above; set with set_lobes (which also
  // integrates the volume). Empty for an ellipsoid.
  std::vector<Lobe> lobes;
  double lobed_volume_mm3 = 0;
  void set_lobes(std::vector<Lobe> extra);
  std::vector<Lobe> all_lobes() const;  // the ellipsoid as lobe 0, then the extra lobes
  double volume_mm3() const;     // ellipsoid: 4/3 pi abc; irregular: the integrated union
  double esd_um() const;         // diameter of the sphere of the same volume
  double bounding_radius_mm() const;  // from the centre, over every lobe (true maximal extent)
  bool contains(const Vec3& p) const;
  Vec3 half_extent_mm() const;   // axis-aligned bounding box half sizes, over every lobe
};

// Volume of a union of flat ellipsoids sharing the plane z = 0 and the semi-axis c_mm along z.
// At height z every lobe's section is its ellipse scaled by k = sqrt(1 - z^2/c^2) about its own
// centre, so V = int A(z) dz with A(z) = int L(x) dx, L the length of the union of the lobes'
// exact chords along y. Midpoint rule with n nodes in z; about 8 n nodes in x, over the pieces
// between the lobes' x-ends, each with a cosine substitution that removes the square-root edges
// there (checked against 4/3 pi a b c and the lens of two spheres in tests).
double flat_union_volume_mm3(const std::vector<Lobe>& lobes, double c_mm, int n = 256);

struct Phantom {
  Geometry grid;                 // voxel centres in the phantom frame (origin = -(n-1)/2 voxel)
  double mu_material = 0;        // 1/mm
  std::vector<Shape> shapes;
  std::vector<Marker> markers;
  std::vector<Pore> pores;
  double part_volume_mm3 = 0;    // the part envelope (material + closed pores)

  // Signed distance to the part surface (< 0 inside); exact outside, a lower bound on the depth
  // inside a union.
  double part_sdf(const Vec3& p) const;
  // Inside the part material or a closed pore (open pores are carved out).
  bool in_part(const Vec3& p) const;
  double closed_pore_volume_mm3() const;
  double porosity_pct() const { return 100.0 * closed_pore_volume_mm3() / part_volume_mm3; }
};

// Places the pores of every population (deterministic from the recipe seed; rejection sampling
// with placement_budget). Throws InputError saying what was reached when a target porosity cannot
// be placed, or when the part does not fit the volume.
Phantom build_phantom(const Recipe& r);

// The phantom as mounted for a posed scan (recipe.hpp ScanPose): shapes, markers and pores moved by
// x' = Rz x + t (yaws turn with the part), on a grid of the same dims with voxels of voxel_mm,
// centred. Throws InputError naming `key` when the moved part leaves that grid (a voxel to spare).
Phantom posed_phantom(const Phantom& ph, const ScanPose& pose, double voxel_mm, const std::string& key);

struct Truth {
  Image<uint8_t> labels;  // 0 background, 1 material, 2 closed pore
  Mask part;              // labels != 0
};

// Truth on the voxel grid: supersampling^3 samples per voxel, the class with most samples wins
// (ties go to the higher label). Parallel over slices; identical for any thread count.
Truth rasterize_truth(const Phantom& ph, int supersampling);

// One row per pore: id, type, population, centre in mm, semi-axes in mm, volume_mm3, esd_um,
// inside_part (false for open pores); when the phantom has irregular voids, one more column
// `lobes` (flat ellipsoids in the union, 1 for an ellipsoid; semi-axes and yaw are lobe 0's).
std::string pores_csv(const Phantom& ph);

// std::mt19937_64 (C++ [rand.predef]: the same seeding, the same sequence of outputs), with the
// state refilled 312 words at a time by vector instructions where the CPU has them.
class Mt19937_64 {
 public:
  using result_type = uint64_t;
  static constexpr size_t kWords = 312;
  explicit Mt19937_64(uint64_t seed = 5489u);
  static constexpr result_type min() { return 0; }
  static constexpr result_type max() { return ~result_type(0); }
  result_type operator()() {
    if (i_ >= kWords) refill();
    uint64_t z = x_[i_++];
    z ^= (z >> 29) & 0x5555555555555555ULL;
    z ^= (z << 17) & 0x71d67fffeda60000ULL;
    z ^= (z << 37) & 0xfff7eee000000000ULL;
    return z ^ (z >> 43);
  }

 private:
  void refill();
  uint64_t x_[kWords];
  size_t i_ = kWords;
};

// Uniform [0,1) and normal draws from mt19937_64 by explicit formulas (53-bit mantissa,
// Box-Muller), so that phantoms do not depend on the standard library's distribution code.
struct Rng {
  explicit Rng(uint64_t seed) : g(seed) {}
  double uniform() { return double(g() >> 11) * 0x1.0p-53; }
  double normal();
  // Poisson count: product of uniforms below mean 10 (Knuth, TAOCP vol. 2, 3.4.1), transformed
  // rejection PTRS above (Hoermann 1993, Insurance: Math. Econ. 12:39; as in numpy).
  int64_t poisson(double mean);
  // The same draws with the per-mean constants taken once (PoissonMean): a caller drawing many
  // counts of one mean (the air around a part) reuses them.
  struct PoissonMean;
  inline int64_t poisson(const PoissonMean& m);
  Mt19937_64 g;

 private:
  int64_t poisson_below_10(const PoissonMean& m);
  static bool ptrs_accept(const PoissonMean& m, double V, double us, double k);
};

// The constants Rng::poisson derives from its mean: exp(-mean) below 10, PTRS's b, a and v_r above
// (1/alpha and the logs of the rare squeeze test are taken only when it runs).
struct Rng::PoissonMean {
  explicit PoissonMean(double mean);
  double lam, limit = 0, b = 0, a = 0, vr = 0;
};

// PTRS's fast acceptance inline (the scan simulation draws hundreds of millions of counts); the
// rest out of line.
int64_t Rng::poisson(const PoissonMean& m) {
  if (m.lam < 10) return poisson_below_10(m);
  for (;;) {
    const double U = uniform() - 0.5, V = uniform(), us = 0.5 - std::abs(U);
    const double k = std::floor((2 * m.a / us + m.b) * U + m.lam + 0.43);
    if (us >= 0.07 && V <= m.vr) return int64_t(k);
    if (k < 0 || (us < 0.013 && V > us)) continue;
    if (ptrs_accept(m, V, us, k)) return int64_t(k);
  }
}

// A seed for stream `stream` of a run seeded with `seed` (SplitMix64 mixing).
uint64_t mix_seed(uint64_t seed, uint64_t stream);

}  // namespace pb::synth
