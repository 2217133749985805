// Porous phantoms: part primitives as signed distance functions (box, cylinder, cylinder minus a
// coaxial bore; union = min, difference = max(a, -b), e.g. Hart (1996) Sphere tracing, The Visual
// Computer 12:527), pores placed by rejection sampling from log-normal sizes, and the voxel truth by
// supersampling with a majority rule. Pores are air (dark in a scan); z is the part axis and the
// build direction; lack-of-fusion voids lie flat in build layers: a flat ellipsoid, or (irregular)
// a union of flat ellipsoids in one layer plane with a numerically integrated volume.
#include "synthetic/phantom.hpp"

#include <algorithm>
#include <cmath>
#include <iomanip>
#include <sstream>

#include "core/cpu.hpp"
#include "core/error.hpp"
#include "core/format.hpp"

namespace pb::synth {

Mt19937_64::Mt19937_64(uint64_t seed) {
  x_[0] = seed;  // [rand.eng.mers]: x_i = f (x_{i-1} xor (x_{i-1} >> (w - 2))) + i, f = 6364136223846793005
  for (size_t i = 1; i < kWords; ++i) x_[i] = 6364136223846793005ULL * (x_[i - 1] ^ (x_[i - 1] >> 62)) + i;
}

namespace {
// The generation step of [rand.eng.mers] for w = 64, n = 312, m = 156, r = 31,
// a = 0xb5026f5aa96619e9: word k takes the upper bit of x_k and the lower 31 of x_{k+1}, shifted,
// xor a when odd, xor x_{k+m}. The first n - m words read only old words, the rest new ones at
// distance n - m: both loops vectorise.
inline __attribute__((always_inline)) void mt_refill(uint64_t* x) {
  constexpr size_t n = Mt19937_64::kWords, m = 156;
  constexpr uint64_t upper = ~uint64_t(0) << 31, lower = ~upper, a = 0xb5026f5aa96619e9ULL;
  for (size_t k = 0; k < n - m; ++k) {
    const uint64_t y = (x[k] & upper) | (x[k + 1] & lower);
    x[k] = x[k + m] ^ (y >> 1) ^ ((0 - (y & 1)) & a);
  }
  for (size_t k = n - m; k < n - 1; ++k) {
    const uint64_t y = (x[k] & upper) | (x[k + 1] & lower);
    x[k] = x[k + m - n] ^ (y >> 1) ^ ((0 - (y & 1)) & a);
  }
  const uint64_t y = (x[n - 1] & upper) | (x[0] & lower);
  x[n - 1] = x[m - 1] ^ (y >> 1) ^ ((0 - (y & 1)) & a);
}
#if defined(__x86_64__) && defined(__GNUC__)
__attribute__((target("avx2"))) void mt_refill_avx2(uint64_t* x) { mt_refill(x); }
#endif
void mt_refill_generic(uint64_t* x) { mt_refill(x); }
}  // namespace

void Mt19937_64::refill() {
#if defined(__x86_64__) && defined(__GNUC__)
  static const bool avx2 = simd_level() != Simd::generic;
  if (avx2) mt_refill_avx2(x_);
  else
#endif
    mt_refill_generic(x_);
  i_ = 0;
}

double Rng::normal() {
  // Box-Muller (Box & Muller 1958, Ann. Math. Statist. 29:610); one value per call.
  const double u1 = 1.0 - uniform(), u2 = uniform();
  return std::sqrt(-2.0 * std::log(u1)) * std::cos(2 * M_PI * u2);
}

Rng::PoissonMean::PoissonMean(double mean) : lam(mean) {
  if (lam <= 0) return;
  if (lam < 10) {
    limit = std::exp(-lam);
    return;
  }
  b = 0.931 + 2.53 * std::sqrt(lam), a = -0.059 + 0.02483 * b;
  vr = 0.9277 - 3.6224 / (b - 2);
}

int64_t Rng::poisson(double lam) { return poisson(PoissonMean(lam)); }

int64_t Rng::poisson_below_10(const PoissonMean& m) {
  if (m.lam <= 0) return 0;
  double prod = uniform();
  int64_t k = 0;
  while (prod > m.limit) {
    prod *= uniform();
    ++k;
  }
  return k;
}

bool Rng::ptrs_accept(const PoissonMean& m, double V, double us, double k) {
  const double lam = m.lam, a = m.a, b = m.b, invalpha = 1.1239 + 1.1328 / (b - 3.4);
  return std::log(V) + std::log(invalpha) - std::log(a / (us * us) + b) <= -lam + k * std::log(lam) - std::lgamma(k + 1);
}

uint64_t mix_seed(uint64_t seed, uint64_t stream) {
  uint64_t z = seed + 0x9e3779b97f4a7c15ULL * (stream + 1);  // SplitMix64 (Steele et al. 2014)
  z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
  z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
  return z ^ (z >> 31);
}

namespace {

double lobe_half_x(const Lobe& l) {
  const double c = std::cos(l.yaw_rad), s = std::sin(l.yaw_rad);
  return std::sqrt(l.a_mm * l.a_mm * c * c + l.b_mm * l.b_mm * s * s);
}
double lobe_half_y(const Lobe& l) {
  const double c = std::cos(l.yaw_rad), s = std::sin(l.yaw_rad);
  return std::sqrt(l.a_mm * l.a_mm * s * s + l.b_mm * l.b_mm * c * c);
}

}  // namespace

double flat_union_volume_mm3(const std::vector<Lobe>& lobes, double c_mm, int n) {
  if (lobes.empty() || !(c_mm > 0) || n < 1) return 0;
  // Each lobe's ellipse, scaled by k about its centre, meets the line x (x measured from the
  // centre) where P y'^2 + 2 Q x y' + S x^2 <= k^2 (y' = y - cy), with P, Q, S from its yaw and
  // semi-axes: y' = (-Q x +- sqrt((Q^2 - P S) x^2 + P k^2)) / P.
  struct Quad {
    double cx, cy, P, Q, D;  // D = Q^2 - P S
  };
  std::vector<Quad> qs;
  for (const Lobe& l : lobes) {
    const double c = std::cos(l.yaw_rad), s = std::sin(l.yaw_rad), ia2 = 1 / (l.a_mm * l.a_mm),
                 ib2 = 1 / (l.b_mm * l.b_mm);
    const double P = s * s * ia2 + c * c * ib2, Q = c * s * (ia2 - ib2), S = c * c * ia2 + s * s * ib2;
    qs.push_back({l.dx_mm, l.dy_mm, P, Q, Q * Q - P * S});
  }
  std::vector<std::array<double, 2>> iv(lobes.size());
  std::vector<double> br;
  double vol = 0;
  for (int iz = 0; iz < n; ++iz) {
    const double zr = -1 + (iz + 0.5) * 2.0 / n, k = std::sqrt(1 - zr * zr);  // z / c at the node
    // Pieces between the lobes' x-ends (each lobe shrinks by k about its own centre), where the
    // union's chord length has square-root edges; on each piece x = u + (v - u)(1 - cos phi) / 2
    // with midpoints in phi, which removes those edges.
    br.clear();
    for (const Lobe& l : lobes) {
      br.push_back(l.dx_mm - k * lobe_half_x(l));
      br.push_back(l.dx_mm + k * lobe_half_x(l));
    }
    std::sort(br.begin(), br.end());
    const int per = std::max(8, 8 * n / int(br.size() - 1));
    double area = 0;
    for (size_t ib = 0; ib + 1 < br.size(); ++ib) {
      const double u = br[ib], v = br[ib + 1];
      if (!(v > u)) continue;
      for (int ix = 0; ix < per; ++ix) {
        const double phi = (ix + 0.5) * M_PI / per;
        const double x = u + (v - u) * (1 - std::cos(phi)) / 2, wx = (v - u) / 2 * std::sin(phi) * M_PI / per;
        size_t m = 0;
        for (const Quad& q : qs) {
          const double xl = x - q.cx, disc = q.D * xl * xl + q.P * k * k;
          if (disc <= 0) continue;
          const double r = std::sqrt(disc);
          iv[m++] = {q.cy + (-q.Q * xl - r) / q.P, q.cy + (-q.Q * xl + r) / q.P};
        }
        std::sort(iv.begin(), iv.begin() + long(m));
        double len = 0, end = -1e300;
        for (size_t i = 0; i < m; ++i) {
          const double a = std::max(iv[i][0], end);
          if (iv[i][1] > a) len += iv[i][1] - a;
          end = std::max(end, iv[i][1]);
        }
        area += len * wx;
      }
    }
    vol += area * (2.0 * c_mm / n);
  }
  return vol;
}

std::vector<Lobe> Pore::all_lobes() const {
  std::vector<Lobe> out{Lobe{0, 0, semi_axes_mm[0], semi_axes_mm[1], yaw_rad}};
  out.insert(out.end(), lobes.begin(), lobes.end());
  return out;
}

void Pore::set_lobes(std::vector<Lobe> extra) {
  lobes = std::move(extra);
  lobed_volume_mm3 = lobes.empty() ? 0 : flat_union_volume_mm3(all_lobes(), semi_axes_mm[2]);
}

double Pore::volume_mm3() const {
  if (!lobes.empty()) return lobed_volume_mm3;
  return 4.0 / 3.0 * M_PI * semi_axes_mm[0] * semi_axes_mm[1] * semi_axes_mm[2];
}
double Pore::esd_um() const { return 1000.0 * std::cbrt(6.0 * volume_mm3() / M_PI); }
double Pore::bounding_radius_mm() const {
  double r = *std::max_element(semi_axes_mm.begin(), semi_axes_mm.end());
  for (const Lobe& l : lobes) r = std::max(r, std::hypot(l.dx_mm, l.dy_mm) + std::max(l.a_mm, l.b_mm));
  return r;
}

namespace {
// (ex, ey) from an ellipse's centre, inside its flat ellipsoid at the relative height w^2 = ww:
// rotated by (c, s) = (cos, sin) of its yaw into its own frame, semi-axes a, b.
inline bool in_section(double ex, double ey, double ww, double c, double s, double a, double b) {
  const double u = (ex * c + ey * s) / a, v = (-ex * s + ey * c) / b;
  return u * u + v * v + ww <= 1.0;
}
}  // namespace

bool Pore::contains(const Vec3& p) const {
  const double dx = p[0] - centre_mm[0], dy = p[1] - centre_mm[1], dz = p[2] - centre_mm[2];
  const double w = dz / semi_axes_mm[2], ww = w * w;
  if (ww > 1.0) return false;
  if (in_section(dx, dy, ww, std::cos(yaw_rad), std::sin(yaw_rad), semi_axes_mm[0], semi_axes_mm[1])) return true;
  for (const Lobe& l : lobes)
    if (in_section(dx - l.dx_mm, dy - l.dy_mm, ww, std::cos(l.yaw_rad), std::sin(l.yaw_rad), l.a_mm, l.b_mm)) return true;
  return false;
}

Vec3 Pore::half_extent_mm() const {
  const double c = std::cos(yaw_rad), s = std::sin(yaw_rad), a = semi_axes_mm[0], b = semi_axes_mm[1];
  Vec3 h{std::sqrt(a * a * c * c + b * b * s * s), std::sqrt(a * a * s * s + b * b * c * c), semi_axes_mm[2]};
  for (const Lobe& l : lobes) {
    h[0] = std::max(h[0], std::abs(l.dx_mm) + lobe_half_x(l));
    h[1] = std::max(h[1], std::abs(l.dy_mm) + lobe_half_y(l));
  }
  return h;
}

namespace {

// A part shape ready for many evaluations: its kind as a number and its rotation's cos and sin
// taken once (the truth rasteriser evaluates millions of samples). Signed distance as in the
// header comment: box, cylinder, cylinder minus its coaxial bore.
struct ShapeSdf {
  enum Kind { Box, Cylinder, GearBlank } kind = Cylinder;
  double cx = 0, cy = 0, cz = 0, c = 1, sn = 0, hx = 0, hy = 0, hz = 0, radius = 0, bore = 0;
  explicit ShapeSdf(const Shape& s)
      : kind(s.kind == "box" ? Box : s.kind == "gear-blank" ? GearBlank : Cylinder),
        cx(s.centre_mm[0]), cy(s.centre_mm[1]), cz(s.centre_mm[2]), radius(s.radius_mm), bore(s.bore_radius_mm) {
    if (kind == Box) {
      const double a = s.angle_deg * M_PI / 180;
      c = std::cos(a);
      sn = std::sin(a);
      hx = s.size_mm[0] / 2, hy = s.size_mm[1] / 2, hz = s.size_mm[2] / 2;
    } else {
      hz = s.height_mm / 2;
    }
  }
  double operator()(const Vec3& p) const {
    const double x = p[0] - cx, y = p[1] - cy, z = p[2] - cz;
    if (kind == Box) {
      const double q[3] = {std::abs(x * c + y * sn) - hx, std::abs(-x * sn + y * c) - hy, std::abs(z) - hz};
      const double ox = std::max(q[0], 0.0), oy = std::max(q[1], 0.0), oz = std::max(q[2], 0.0);
      return std::sqrt(ox * ox + oy * oy + oz * oz) + std::min(std::max({q[0], q[1], q[2]}), 0.0);
    }
    const double r = std::hypot(x, y);
    const double d2 = r - radius, dz = std::abs(z) - hz;
    double d = std::min(std::max(d2, dz), 0.0) + std::hypot(std::max(d2, 0.0), std::max(dz, 0.0));
    if (kind == GearBlank) d = std::max(d, bore - r);
    return d;
  }
};

// The part (union of its shapes) ready for many evaluations; same values as Phantom::part_sdf.
struct PartSdf {
  std::vector<ShapeSdf> shapes;
  explicit PartSdf(const std::vector<Shape>& s) : shapes(s.begin(), s.end()) {}
  double operator()(const Vec3& p) const {
    double d = std::numeric_limits<double>::infinity();
    for (const ShapeSdf& s : shapes) d = std::min(d, s(p));
    return d;
  }
};

// A pore ready for many evaluations: the cos and sin of its yaw and of every lobe's taken once;
// contains() is Pore::contains.
struct PoreTest {
  struct Section {
    double dx, dy, a, b, c, s;
  };
  const Pore* pore;
  Vec3 centre;
  double c_mm;
  std::vector<Section> sections;  // the ellipsoid, then the lobes
  explicit PoreTest(const Pore& p) : pore(&p), centre(p.centre_mm), c_mm(p.semi_axes_mm[2]) {
    sections.push_back({0, 0, p.semi_axes_mm[0], p.semi_axes_mm[1], std::cos(p.yaw_rad), std::sin(p.yaw_rad)});
    for (const Lobe& l : p.lobes) sections.push_back({l.dx_mm, l.dy_mm, l.a_mm, l.b_mm, std::cos(l.yaw_rad), std::sin(l.yaw_rad)});
  }
  bool contains(const Vec3& q) const {
    const double dx = q[0] - centre[0], dy = q[1] - centre[1], dz = q[2] - centre[2];
    const double w = dz / c_mm, ww = w * w;
    if (ww > 1.0) return false;
    if (in_section(dx, dy, ww, sections[0].c, sections[0].s, sections[0].a, sections[0].b)) return true;
    for (size_t i = 1; i < sections.size(); ++i) {
      const Section& e = sections[i];
      if (in_section(dx - e.dx, dy - e.dy, ww, e.c, e.s, e.a, e.b)) return true;
    }
    return false;
  }
};

double shape_sdf(const Shape& s, const Vec3& p) { return ShapeSdf(s)(p); }

// Axis-aligned bounding box of a shape: {min, max} in mm.
std::array<Vec3, 2> shape_box(const Shape& s) {
  Vec3 h;
  if (s.kind == "box") {
    const double a = s.angle_deg * M_PI / 180, c = std::abs(std::cos(a)), sn = std::abs(std::sin(a));
    h = {(s.size_mm[0] * c + s.size_mm[1] * sn) / 2, (s.size_mm[0] * sn + s.size_mm[1] * c) / 2, s.size_mm[2] / 2};
  } else {
    h = {s.radius_mm, s.radius_mm, s.height_mm / 2};
  }
  return {Vec3{s.centre_mm[0] - h[0], s.centre_mm[1] - h[1], s.centre_mm[2] - h[2]},
          Vec3{s.centre_mm[0] + h[0], s.centre_mm[1] + h[1], s.centre_mm[2] + h[2]}};
}

double shape_volume(const Shape& s) {
  if (s.kind == "box") return s.size_mm[0] * s.size_mm[1] * s.size_mm[2];
  double v = M_PI * s.radius_mm * s.radius_mm * s.height_mm;
  if (s.kind == "gear-blank") v -= M_PI * s.bore_radius_mm * s.bore_radius_mm * s.height_mm;
  return v;
}

std::string mm(double v) { return format_number(v, 4, nullptr) + " mm"; }

struct Placer {
  const Phantom& ph;
  const Recipe& r;
  std::array<Vec3, 2> box;  // part bounding box
  double voxel;

  bool fits_volume(const Vec3& c, double rad) const {
    for (int i = 0; i < 3; ++i) {
      const double half = (ph.grid.dims[i] - 1) / 2.0 * voxel;
      if (c[i] - rad < -half + voxel || c[i] + rad > half - voxel) return false;
    }
    return true;
  }
  bool clear_of_others(const Pore& p) const {
    const double gap = voxel;  // common practice, no source: keep pores a voxel apart so they stay separate
    for (const Pore& q : ph.pores) {
      const double d = std::hypot(p.centre_mm[0] - q.centre_mm[0], p.centre_mm[1] - q.centre_mm[1],
                                  p.centre_mm[2] - q.centre_mm[2]);
      if (d < p.bounding_radius_mm() + q.bounding_radius_mm() + gap) return false;
    }
    for (const Marker& m : ph.markers) {
      const double d = std::hypot(p.centre_mm[0] - m.centre_mm[0], p.centre_mm[1] - m.centre_mm[1],
                                  p.centre_mm[2] - m.centre_mm[2]);
      if (d < p.bounding_radius_mm() + m.radius_mm + gap) return false;
    }
    return true;
  }
  Vec3 random_point(Rng& g) const {
    Vec3 c;
    for (int i = 0; i < 3; ++i) c[i] = box[0][i] + (box[1][i] - box[0][i]) * g.uniform();
    return c;
  }
};

}  // namespace

double Phantom::part_sdf(const Vec3& p) const {
  double d = std::numeric_limits<double>::infinity();
  for (const Shape& s : shapes) d = std::min(d, shape_sdf(s, p));
  return d;
}

bool Phantom::in_part(const Vec3& p) const {
  if (part_sdf(p) >= 0) return false;
  for (const Pore& q : pores)
    if (q.open && q.contains(p)) return false;
  return true;
}

double Phantom::closed_pore_volume_mm3() const {
  double v = 0;
  for (const Pore& p : pores)
    if (!p.open) v += p.volume_mm3();
  return v;
}

namespace {

// The phantom without pores: grid (origin at the volume centre), material, shapes and markers.
Phantom empty_phantom(const Recipe& r) {
  Phantom ph;
  const double s = r.voxel_mm();
  ph.grid.dims = r.dims;
  ph.grid.spacing_mm = {s, s, s};
  for (int i = 0; i < 3; ++i) ph.grid.origin_mm[i] = -(r.dims[i] - 1) / 2.0 * s;
  ph.mu_material = r.material_mu();
  ph.shapes = r.shapes;
  ph.markers = r.markers;
  return ph;
}

// The part's bounding box; the part must fit the volume with a voxel to spare, or the scan would
// cut it.
std::array<Vec3, 2> part_box(const Recipe& r) {
  const double s = r.voxel_mm();
  std::array<Vec3, 2> box{Vec3{1e30, 1e30, 1e30}, Vec3{-1e30, -1e30, -1e30}};
  const char* axis = "xyz";
  for (size_t k = 0; k < r.shapes.size(); ++k) {
    const auto b = shape_box(r.shapes[k]);
    for (int i = 0; i < 3; ++i) {
      const double half = (r.dims[i] - 1) / 2.0 * s - s;
      if (b[0][i] < -half || b[1][i] > half)
        throw InputError("recipe: phantom.shape." + std::to_string(k) + " spans " + mm(b[0][i]) + " to " + mm(b[1][i]) +
                         " along " + axis[i] + ", outside the volume (+-" + mm(half) +
                         "); enlarge phantom.dims or shrink the shape");
      box[0][i] = std::min(box[0][i], b[0][i]);
      box[1][i] = std::max(box[1][i], b[1][i]);
    }
  }
  return box;
}

// Part volume: analytic for one shape; for a union, counted on a grid of 4 samples per voxel edge.
double part_volume(const Phantom& ph, const std::array<Vec3, 2>& box, double s) {
  if (ph.shapes.size() == 1) return shape_volume(ph.shapes[0]);
  const int m = 4;
  const double h = s / m;
  int64_t count = 0;
  const int64_t nz = int64_t(std::ceil((box[1][2] - box[0][2]) / h));
#pragma omp parallel for schedule(static) reduction(+ : count)
  for (int64_t k = 0; k < nz; ++k)
    for (double y = box[0][1] + h / 2; y < box[1][1]; y += h)
      for (double x = box[0][0] + h / 2; x < box[1][0]; x += h)
        count += ph.part_sdf({x, y, box[0][2] + (k + 0.5) * h}) < 0;
  return double(count) * h * h * h;
}

// Draws the pores of population `pi` from its own random stream (sizes, yaw, lobes); the order of
// the draws is part of the phantom's definition (same seed, same pores).
struct PoreMaker {
  const PorePopulation& q;
  int pi;
  const std::array<Vec3, 2>& box;
  Rng& g;

  double diameter_mm() {
    const double med = q.median_diameter_um * 1e-3;
    double d;
    do {
      d = med * std::exp(q.spread * std::max(-3.0, std::min(3.0, g.normal())));
    } while (d < q.min_diameter_um * 1e-3);
    return d;
  }
  Pore operator()(const Vec3& c) {
    Pore p;
    p.population = pi;
    p.type = q.type;
    p.centre_mm = c;
    const double d = diameter_mm();
    if (q.type == "lack-of-fusion") {
      p.semi_axes_mm = {d / 2, q.aspect * d / 2, q.thickness_um * 1e-3 / 2};
      p.yaw_rad = M_PI * g.uniform();
      // Centred on a layer boundary, counted from the bottom of the part.
      const double layer = q.layer_um * 1e-3;
      p.centre_mm[2] = box[0][2] + std::round((c[2] - box[0][2]) / layer) * layer;
      if (q.shape == "irregular") add_lobes(p);
    } else {
      p.semi_axes_mm = {d / 2, d / 2, d / 2};
    }
    return p;
  }
  // Further lobes (recipe.hpp): size lobe_scale x U(0.5, 1), yaw U(0, pi), centre at rho =
  // U(0.5, 0.9) of the first lobe's semi-axes in direction psi = U(0, 2 pi), so it lies inside the
  // first ellipse and the union is one void. Volume integrated on acceptance.
  void add_lobes(Pore& p) {
    const double a = p.semi_axes_mm[0], b = p.semi_axes_mm[1];
    const double cy = std::cos(p.yaw_rad), sy = std::sin(p.yaw_rad);
    for (int j = 1; j < q.lobes; ++j) {
      const double scale = q.lobe_scale * (0.5 + 0.5 * g.uniform());
      const double yaw = M_PI * g.uniform();
      const double rho = 0.5 + 0.4 * g.uniform();
      const double psi = 2 * M_PI * g.uniform();
      const double lx = rho * a * std::cos(psi), ly = rho * b * std::sin(psi);
      p.lobes.push_back(Lobe{lx * cy - ly * sy, lx * sy + ly * cy, scale * a, scale * b, yaw});
    }
  }
};

// Closed pores of one population until its target porosity is reached (within 2 %); returns the
// attempts used (the open pores of the population share the budget count).
int64_t place_closed_pores(Phantom& ph, const Recipe& r, const Placer& pl, int pi, PoreMaker& make, Rng& g) {
  const PorePopulation& q = r.pores[size_t(pi)];
  const double s = r.voxel_mm();
  const double target = q.porosity_pct / 100.0 * ph.part_volume_mm3, tol = 0.02 * target;
  double placed = 0;
  int64_t attempts = 0;
  int n_placed = 0;
  Vec3 cluster_centre{0, 0, 0};
  int left_in_cluster = 0;
  const double sigma_cluster = q.cluster_radius_um * 1e-3 / 2;
  while (placed < target - tol) {
    if (++attempts > r.placement_budget) {
      std::ostringstream os;
      os << "recipe: pores." << pi << " (" << q.type << "): target porosity " << q.porosity_pct
         << " % cannot be placed: reached " << std::setprecision(3) << 100.0 * placed / ph.part_volume_mm3
         << " % with " << n_placed << " pores after " << r.placement_budget
         << " attempts; lower porosity_pct or the pore size, or raise phantom.placement_budget";
      throw InputError(os.str());
    }
    Vec3 c;
    if (q.type == "cluster") {
      if (left_in_cluster <= 0) {
        cluster_centre = pl.random_point(g);
        if (ph.part_sdf(cluster_centre) > -sigma_cluster) continue;
        left_in_cluster = q.pores_per_cluster;
      }
      for (int i = 0; i < 3; ++i) c[i] = cluster_centre[i] + sigma_cluster * g.normal();
    } else {
      c = pl.random_point(g);
    }
    Pore p = make(c);
    if (!p.lobes.empty()) {
      // The union volume lies between the largest lobe's and the sum of the lobes' volumes:
      // integrate it only when those bounds do not settle the porosity check (same decisions).
      double largest = 0, sum = 0;
      for (const Lobe& l : p.all_lobes()) {
        const double vl = 4.0 / 3.0 * M_PI * l.a_mm * l.b_mm * p.semi_axes_mm[2];
        largest = std::max(largest, vl);
        sum += vl;
      }
      if (placed + largest > target + tol) continue;
      if (placed + sum > target + tol) p.set_lobes(p.lobes);
    }
    if (placed + p.volume_mm3() > target + tol) continue;  // irregular and not integrated: <= sum
    const double rad = p.bounding_radius_mm();
    if (ph.part_sdf(p.centre_mm) > -(rad + s) || !pl.fits_volume(p.centre_mm, rad) || !pl.clear_of_others(p)) {
      if (q.type == "cluster" && attempts % 50 == 0) left_in_cluster = 0;  // crowded cluster: start another
      continue;
    }
    if (!p.lobes.empty() && p.lobed_volume_mm3 == 0) p.set_lobes(p.lobes);
    const double v = p.volume_mm3();
    p.id = int(ph.pores.size()) + 1;
    ph.pores.push_back(p);
    placed += v;
    ++n_placed;
    --left_in_cluster;
  }
  return attempts;
}

// Open pores of one population: cut by the part surface (centre within half a radius of it).
void place_open_pores(Phantom& ph, const Recipe& r, const Placer& pl, int pi, PoreMaker& make, Rng& g,
                      int64_t attempts) {
  const PorePopulation& q = r.pores[size_t(pi)];
  for (int k = 0; k < q.open_count;) {
    if (++attempts > 2 * r.placement_budget)
      throw InputError("recipe: pores." + std::to_string(pi) + ".open_count = " + std::to_string(q.open_count) +
                       ": only " + std::to_string(k) + " open pores could be placed");
    Pore p = make(pl.random_point(g));
    const double rad = p.bounding_radius_mm();
    if (std::abs(ph.part_sdf(p.centre_mm)) > 0.5 * rad || !pl.fits_volume(p.centre_mm, rad) || !pl.clear_of_others(p))
      continue;
    if (!p.lobes.empty()) p.set_lobes(p.lobes);
    p.open = true;
    p.id = int(ph.pores.size()) + 1;
    ph.pores.push_back(p);
    ++k;
  }
}

}  // namespace

Phantom build_phantom(const Recipe& r) {
  validate(r);
  Phantom ph = empty_phantom(r);
  const std::array<Vec3, 2> box = part_box(r);
  ph.part_volume_mm3 = part_volume(ph, box, r.voxel_mm());
  const Placer pl{ph, r, box, r.voxel_mm()};
  for (size_t pi = 0; pi < r.pores.size(); ++pi) {
    Rng g(mix_seed(r.seed, pi));
    PoreMaker make{r.pores[pi], int(pi), box, g};
    const int64_t attempts = place_closed_pores(ph, r, pl, int(pi), make, g);
    place_open_pores(ph, r, pl, int(pi), make, g, attempts);
  }
  return ph;
}

Phantom posed_phantom(const Phantom& ph, const ScanPose& pose, double voxel_mm, const std::string& key) {
  Phantom out = ph;
  const double th = pose.rotation_deg[2] * M_PI / 180, c = std::cos(th), sn = std::sin(th);
  const auto& t = pose.translation_mm;
  const auto move = [&](const auto& p) {  // x' = Rz x + t
    return std::array<double, 3>{c * p[0] - sn * p[1] + t[0], sn * p[0] + c * p[1] + t[1], p[2] + t[2]};
  };
  for (int i = 0; i < 3; ++i) {
    out.grid.spacing_mm[i] = voxel_mm;
    out.grid.origin_mm[i] = -(ph.grid.dims[i] - 1) / 2.0 * voxel_mm;
  }
  const char* axis = "xyz";
  for (size_t k = 0; k < out.shapes.size(); ++k) {
    Shape& s = out.shapes[k];
    s.centre_mm = move(s.centre_mm);
    s.angle_deg += pose.rotation_deg[2];
    const auto b = shape_box(s);
    for (int i = 0; i < 3; ++i) {
      const double half = (ph.grid.dims[i] - 1) / 2.0 * voxel_mm - voxel_mm;
      if (b[0][i] < -half || b[1][i] > half)
        throw InputError("recipe: " + key + " moves phantom.shape." + std::to_string(k) + " to " + mm(b[0][i]) + " .. " +
                         mm(b[1][i]) + " along " + axis[i] + ", outside the scan's volume (+-" + mm(half) +
                         "); lower the translation or raise the voxel size");
    }
  }
  for (Marker& m : out.markers) m.centre_mm = move(m.centre_mm);
  for (Pore& p : out.pores) {
    p.centre_mm = move(p.centre_mm);
    p.yaw_rad += th;
    for (Lobe& l : p.lobes) {  // offsets turn with the part; the union's volume is unchanged
      const double dx = l.dx_mm, dy = l.dy_mm;
      l.dx_mm = c * dx - sn * dy;
      l.dy_mm = sn * dx + c * dy;
      l.yaw_rad += th;
    }
  }
  return out;
}

Truth rasterize_truth(const Phantom& ph, int ss) {
  if (ss < 1) throw InputError("supersampling must be >= 1");
  const Geometry& g = ph.grid;
  const double s = g.spacing_mm[0];
  Truth t{Image<uint8_t>(g), Mask(g)};
  const int n_sub = ss * ss * ss;
  std::vector<double> off(static_cast<size_t>(ss));
  for (int j = 0; j < ss; ++j) off[size_t(j)] = ((j + 0.5) / ss - 0.5) * s;
  const double boundary = 0.5 * std::sqrt(3.0) * s;  // half the voxel diagonal
  const int64_t nx = g.dims[0], ny = g.dims[1], nz = g.dims[2];
  const PartSdf part_sdf(ph.shapes);
  std::vector<PoreTest> pores;
  pores.reserve(ph.pores.size());
  for (const Pore& p : ph.pores) pores.emplace_back(p);

#pragma omp parallel for schedule(static)
  for (int64_t z = 0; z < nz; ++z) {
    const double zc = g.origin_mm[2] + z * s;
    std::vector<uint16_t> part(size_t(nx * ny)), pore(size_t(nx * ny), 0);
    for (int64_t y = 0; y < ny; ++y)
      for (int64_t x = 0; x < nx; ++x) {
        const Vec3 c{g.origin_mm[0] + x * s, g.origin_mm[1] + y * s, zc};
        const double d = part_sdf(c);
        int cnt = 0;
        if (d <= -boundary) cnt = n_sub;
        else if (d < boundary)
          for (int k = 0; k < ss; ++k)
            for (int j = 0; j < ss; ++j)
              for (int i = 0; i < ss; ++i)
                cnt += part_sdf({c[0] + off[size_t(i)], c[1] + off[size_t(j)], c[2] + off[size_t(k)]}) < 0;
        part[size_t(y * nx + x)] = uint16_t(cnt);
      }
    // Pores stamped over their bounding boxes; they never overlap, so counts simply add.
    std::vector<const PoreTest*> here;
    for (const PoreTest& pt : pores) {
      const Pore& p = *pt.pore;
      const Vec3 h = p.half_extent_mm();
      if (p.centre_mm[2] + h[2] < zc - s / 2 || p.centre_mm[2] - h[2] > zc + s / 2) continue;
      here.push_back(&pt);
    }
    for (const PoreTest* pt : here) {
      const Pore& p = *pt->pore;
      const Vec3 h = p.half_extent_mm();
      const int64_t x0 = std::max<int64_t>(0, int64_t(std::floor((p.centre_mm[0] - h[0] - g.origin_mm[0]) / s))),
                    x1 = std::min<int64_t>(nx - 1, int64_t(std::ceil((p.centre_mm[0] + h[0] - g.origin_mm[0]) / s))),
                    y0 = std::max<int64_t>(0, int64_t(std::floor((p.centre_mm[1] - h[1] - g.origin_mm[1]) / s))),
                    y1 = std::min<int64_t>(ny - 1, int64_t(std::ceil((p.centre_mm[1] + h[1] - g.origin_mm[1]) / s)));
      for (int64_t y = y0; y <= y1; ++y)
        for (int64_t x = x0; x <= x1; ++x) {
          const Vec3 c{g.origin_mm[0] + x * s, g.origin_mm[1] + y * s, zc};
          int in = 0, carved = 0;
          for (int k = 0; k < ss; ++k)
            for (int j = 0; j < ss; ++j)
              for (int i = 0; i < ss; ++i) {
                const Vec3 q{c[0] + off[size_t(i)], c[1] + off[size_t(j)], c[2] + off[size_t(k)]};
                if (!pt->contains(q)) continue;
                if (!p.open) ++in;
                else if (part_sdf(q) < 0) ++carved;  // open pore: air that was part
              }
          pore[size_t(y * nx + x)] = uint16_t(pore[size_t(y * nx + x)] + in);
          part[size_t(y * nx + x)] = uint16_t(part[size_t(y * nx + x)] - carved);
        }
    }
    uint8_t* lab = t.labels.slice(z);
    uint8_t* msk = t.part.slice(z);
    for (int64_t i = 0; i < nx * ny; ++i) {
      const int n[3] = {n_sub - part[size_t(i)], part[size_t(i)] - pore[size_t(i)], pore[size_t(i)]};
      const int best = std::max({n[0], n[1], n[2]});
      uint8_t l = n[2] == best ? 2 : n[1] == best ? 1 : 0;
      if ((n[0] == best) + (n[1] == best) + (n[2] == best) > 1) {
        // A tie (common when the surface runs along sample rows) goes to the class at the voxel
        // centre when it is one of the tied classes, so that ties do not bias volumes.
        const Vec3 c{g.origin_mm[0] + double(i % nx) * s, g.origin_mm[1] + double(i / nx) * s, zc};
        uint8_t cc = ph.in_part(c) ? 1 : 0;
        if (cc == 1)
          for (const PoreTest* p : here)
            if (!p->pore->open && p->contains(c)) cc = 2;
        if (n[cc] == best) l = cc;
      }
      lab[i] = l;
      msk[i] = l != 0;
    }
  }
  return t;
}

std::string pores_csv(const Phantom& ph) {
  std::ostringstream os;
  const bool lobed = std::any_of(ph.pores.begin(), ph.pores.end(), [](const Pore& p) { return !p.lobes.empty(); });
  os << "id,type,population,x_mm,y_mm,z_mm,semi_axis_a_mm,semi_axis_b_mm,semi_axis_c_mm,yaw_deg,volume_mm3,esd_um,"
        "inside_part"
     << (lobed ? ",lobes\n" : "\n");
  os << std::setprecision(9);
  for (const Pore& p : ph.pores) {
    os << p.id << ',' << p.type << ',' << p.population << ',' << p.centre_mm[0] << ',' << p.centre_mm[1] << ','
       << p.centre_mm[2] << ',' << p.semi_axes_mm[0] << ',' << p.semi_axes_mm[1] << ',' << p.semi_axes_mm[2] << ','
       << p.yaw_rad * 180 / M_PI << ',' << p.volume_mm3() << ',' << p.esd_um() << ',' << (p.open ? "false" : "true");
    if (lobed) os << ',' << 1 + p.lobes.size();
    os << '\n';
  }
  return os.str();
}

}  // namespace pb::synth
