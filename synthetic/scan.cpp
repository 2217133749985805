// Simulated acquisition: exact chords through z-extruded part shapes, ellipsoid cross-sections
// (an irregular void: the union of its lobes' sections, chord = length of the merged intervals) and
// marker spheres (Kak & Slaney 1988 ch. 3 for ellipse projections), photon counting noise
// I = Poisson(I0 exp(-p)) (Beer-Lambert), -log with a noise-free flat field, FBP (fbp.hpp).
// Conventions: see ct_geometry.hpp; slices are independent, so everything is parallel over z.
#include "synthetic/scan.hpp"

#include <algorithm>
#include <cmath>
#include <cstring>
#include <sstream>

#include "core/error.hpp"
#include "synthetic/ct_phantoms.hpp"
#include "synthetic/fbp.hpp"

namespace pb::synth {

std::string ScanSpec::file_name(bool dose_series) const {
  if (reference) return "reference-scan.mha";
  std::ostringstream os;
  os << "scan-" << projections << "p";
  if (dose_series) os << "-i0-" << std::llround(i0);
  os << ".mha";
  return os.str();
}

double detector_counts(Rng& rng, double expected, double electronic_sigma) {
  return detector_counts(rng, Rng::PoissonMean(expected), electronic_sigma);
}

double detector_counts(Rng& rng, const Rng::PoissonMean& expected, double electronic_sigma) {
  double counts = double(rng.poisson(expected));
  if (electronic_sigma > 0) counts += electronic_sigma * rng.normal();
  return counts;
}

double log_transmission(double counts, double i0) {
  // Common practice, no source: clamp counts at half a photon before the log.
  return -std::log(std::max(counts, 0.5) / i0);
}

std::vector<ScanSpec> scan_list(const Recipe& r) {
  std::vector<ScanSpec> out{{r.reference_projections, r.reference_dose(), true}};
  for (int n : r.projections)
    for (double d : r.i0) out.push_back({n, d, false});
  return out;
}

ParallelGeometry scan_geometry(const Recipe& r, int projections) {
  ParallelGeometry g;
  g.angles = projections;
  g.arc_deg = r.arc_deg;
  g.bin_mm = r.voxel_mm();
  g.bins = r.detector_bins > 0 ? r.detector_bins : detector_bins_for(r.dims[0], r.dims[1], r.voxel_mm(), g.bin_mm);
  return g;
}

namespace {

// The cross-section of the phantom at one plane.
struct Scene {
  struct Part {
    int kind;  // 0 rectangle, 1 disc, 2 annulus
    double cx, cy, hx, hy, angle, r_out, r_in, ca = 1, sa = 0;
  };
  std::vector<Part> parts;
  std::vector<Ellipse2D> closed, open, markers;
  std::vector<std::vector<Ellipse2D>> closed_unions, open_unions;  // irregular voids: lobe sections
  double mu = 0;
};

Scene scene_at(const Phantom& ph, double z) {
  Scene sc;
  sc.mu = ph.mu_material;
  for (const Shape& s : ph.shapes) {
    const double h = s.kind == "box" ? s.size_mm[2] / 2 : s.height_mm / 2;
    if (std::abs(z - s.centre_mm[2]) >= h) continue;
    Scene::Part p{0, s.centre_mm[0], s.centre_mm[1], s.size_mm[0] / 2, s.size_mm[1] / 2, s.angle_deg * M_PI / 180,
                  s.radius_mm, s.bore_radius_mm};
    p.kind = s.kind == "box" ? 0 : s.kind == "cylinder" ? 1 : 2;
    p.ca = std::cos(p.angle);
    p.sa = std::sin(p.angle);
    sc.parts.push_back(p);
  }
  auto section = [z](const Vec3& c, const Vec3& ax, double yaw, double value, Ellipse2D& e) {
    const double dz = (z - c[2]) / ax[2], k = 1 - dz * dz;
    if (k <= 0) return false;
    e = {c[0], c[1], ax[0] * std::sqrt(k), ax[1] * std::sqrt(k), yaw, value};
    return true;
  };
  Ellipse2D e;
  for (const Pore& p : ph.pores) {
    if (!section(p.centre_mm, p.semi_axes_mm, p.yaw_rad, 1.0, e)) continue;
    if (p.lobes.empty()) {
      (p.open ? sc.open : sc.closed).push_back(e);
      continue;
    }
    // Lobes share the pore's plane and thickness, so each section is the lobe scaled by the same k.
    const double k = e.a / p.semi_axes_mm[0];
    std::vector<Ellipse2D> u{e};
    for (const Lobe& l : p.lobes)
      u.push_back({p.centre_mm[0] + l.dx_mm, p.centre_mm[1] + l.dy_mm, k * l.a_mm, k * l.b_mm, l.yaw_rad, 1.0});
    (p.open ? sc.open_unions : sc.closed_unions).push_back(std::move(u));
  }
  for (const Marker& m : ph.markers)
    if (section(m.centre_mm, {m.radius_mm, m.radius_mm, m.radius_mm}, 0, m.mu_per_mm, e)) sc.markers.push_back(e);
  return sc;
}

struct Interval {
  double a, b;
};

// Intervals of the ray inside the part, merged (sorted, disjoint). At most 2 per shape.
int part_intervals(const Scene& sc, double ct, double st, double t, Interval* out, int cap) {
  int n = 0;
  Interval tmp[32];
  const int max_tmp = std::min(cap, 32);
  const double ox = t * ct, oy = t * st, dx = -st, dy = ct;
  for (const Scene::Part& p : sc.parts) {
    if (n + 2 > max_tmp) break;
    const double px = ox - p.cx, py = oy - p.cy;
    if (p.kind == 0) {  // slab method in the rectangle's frame
      const double c = p.ca, s = p.sa;
      const double lx = px * c + py * s, ly = -px * s + py * c, ldx = dx * c + dy * s, ldy = -dx * s + dy * c;
      double lo = -1e300, hi = 1e300;
      bool miss = false;
      auto slab = [&](double o, double d, double h) {
        if (std::abs(d) < 1e-300) {
          if (std::abs(o) > h) miss = true;
          return;
        }
        double t1 = (-h - o) / d, t2 = (h - o) / d;
        if (t1 > t2) std::swap(t1, t2);
        lo = std::max(lo, t1);
        hi = std::min(hi, t2);
      };
      slab(lx, ldx, p.hx);
      slab(ly, ldy, p.hy);
      if (!miss && hi > lo) tmp[n++] = {lo, hi};
    } else {
      // Disc: |(px, py) + s d|^2 = r^2, |d| = 1.
      const double B = px * dx + py * dy, C0 = px * px + py * py;
      const double D = B * B - C0 + p.r_out * p.r_out;
      if (D <= 0) continue;
      const double r = std::sqrt(D);
      const double s0 = -B - r, s1 = -B + r;
      const double Di = p.kind == 2 ? B * B - C0 + p.r_in * p.r_in : -1;
      if (Di > 0) {
        const double ri = std::sqrt(Di);
        tmp[n++] = {s0, -B - ri};
        tmp[n++] = {-B + ri, s1};
      } else {
        tmp[n++] = {s0, s1};
      }
    }
  }
  std::sort(tmp, tmp + n, [](const Interval& x, const Interval& y) { return x.a < y.a; });
  int m = 0;
  for (int i = 0; i < n; ++i) {
    if (m > 0 && tmp[i].a <= out[m - 1].b) out[m - 1].b = std::max(out[m - 1].b, tmp[i].b);
    else out[m++] = tmp[i];
  }
  return m;
}

// An ellipse seen at one angle: the ray origin in the ellipse's scaled frame is linear in t, so
// each ray costs a quadratic and no trigonometry (same algebra as ellipse_interval in ct_phantoms.cpp).
struct EllipseAtAngle {
  double u0c, u0t, v0c, v0t, ud, vd, A, inv_A;
  int k0, k1;  // bins inside the shadow tc +- w
  EllipseAtAngle(const Ellipse2D& e, double ct, double st, double t0, double dt, int n) {
    const double cp = std::cos(e.phi_rad), sp = std::sin(e.phi_rad);
    u0c = (-e.cx * cp - e.cy * sp) / e.a, u0t = (ct * cp + st * sp) / e.a;
    v0c = (e.cx * sp - e.cy * cp) / e.b, v0t = (-ct * sp + st * cp) / e.b;
    ud = (-st * cp + ct * sp) / e.a, vd = (st * sp + ct * cp) / e.b;
    A = ud * ud + vd * vd, inv_A = 1 / A;
    const double tc = e.cx * ct + e.cy * st;
    const double c = ct * cp + st * sp, s = st * cp - ct * sp;  // cos and sin of theta - phi
    const double w = std::sqrt(e.a * e.a * c * c + e.b * e.b * s * s);
    k0 = std::max(0, int(std::floor((tc - w - t0) / dt)));
    k1 = std::min(n - 1, int(std::ceil((tc + w - t0) / dt)));
  }
  bool interval(double t, double& s0, double& s1) const {
    const double u0 = u0c + t * u0t, v0 = v0c + t * v0t;
    const double B = u0 * ud + v0 * vd, C = u0 * u0 + v0 * v0 - 1, disc = B * B - A * C;
    if (disc <= 0) return false;
    const double r = std::sqrt(disc);
    s0 = (-B - r) * inv_A;
    s1 = (-B + r) * inv_A;
    return true;
  }
  double chord(double t) const {
    const double u0 = u0c + t * u0t, v0 = v0c + t * v0t;
    const double B = u0 * ud + v0 * vd, C = u0 * u0 + v0 * v0 - 1, disc = B * B - A * C;
    return disc > 0 ? 2 * std::sqrt(disc) * inv_A : 0.0;
  }
};

// With `touched` (one flag per ray), only the flagged rays are computed (the others of `out` are
// left as they are); every pore and marker range must be flagged (mark_shadows), so that each
// flagged ray gets exactly the value of the full computation.
void scene_line_integrals(const Scene& sc, double theta, double t0, double dt, int n, double* out,
                          const uint8_t* touched = nullptr) {
  const double ct = std::cos(theta), st = std::sin(theta);
  // The part's intervals along every ray, kept (flat, from first[k]) when open pores need them
  // again: computed once per ray.
  const bool keep = !sc.open.empty() || !sc.open_unions.empty();
  thread_local std::vector<Interval> kept;
  thread_local std::vector<size_t> first;
  if (keep) {
    kept.clear();
    first.assign(size_t(n) + 1, 0);
  }
  Interval iv[32];
  for (int k = 0; k < n; ++k) {
    if (touched && !touched[k]) {
      if (keep) first[size_t(k)] = kept.size();
      continue;
    }
    const int m = part_intervals(sc, ct, st, t0 + k * dt, iv, 32);
    double len = 0;
    for (int i = 0; i < m; ++i) len += iv[i].b - iv[i].a;
    out[k] = len;
    if (keep) {
      first[size_t(k)] = kept.size();
      kept.insert(kept.end(), iv, iv + m);
    }
  }
  if (keep) first[size_t(n)] = kept.size();
  // The part's intervals of ray k: [part_at(k), part_at(k) + part_count(k)).
  const auto part_at = [&](int k) { return kept.data() + first[size_t(k)]; };
  const auto part_count = [&](int k) { return int(first[size_t(k) + 1] - first[size_t(k)]); };
  for (const Ellipse2D& e : sc.closed) {  // closed pores lie inside the part: subtract their chords
    const EllipseAtAngle ea(e, ct, st, t0, dt, n);
    for (int k = ea.k0; k <= ea.k1; ++k) out[k] -= ea.chord(t0 + k * dt);
  }
  for (const Ellipse2D& e : sc.open) {  // open pores: subtract only where they cut the part
    const EllipseAtAngle ea(e, ct, st, t0, dt, n);
    for (int k = ea.k0; k <= ea.k1; ++k) {
      double s0, s1;
      if (!ea.interval(t0 + k * dt, s0, s1)) continue;
      const Interval* pv = part_at(k);
      const int m = part_count(k);
      for (int i = 0; i < m; ++i) out[k] -= std::max(0.0, std::min(s1, pv[i].b) - std::max(s0, pv[i].a));
    }
  }
  // Irregular voids: the merged intervals of the lobes along each ray; closed ones lie inside the
  // part, open ones count only where they cut it.
  auto unions = [&](const std::vector<std::vector<Ellipse2D>>& list, bool open) {
    std::vector<EllipseAtAngle> lobes;
    for (const auto& u : list) {
      lobes.clear();
      int k0 = n, k1 = -1;
      for (const Ellipse2D& e : u) {
        lobes.emplace_back(e, ct, st, t0, dt, n);
        k0 = std::min(k0, lobes.back().k0);
        k1 = std::max(k1, lobes.back().k1);
      }
      Interval li[16];
      for (int k = k0; k <= k1; ++k) {
        const double t = t0 + k * dt;
        int m = 0;
        for (const EllipseAtAngle& ea : lobes) {
          double s0, s1;
          if (m < 16 && ea.interval(t, s0, s1)) li[m++] = {s0, s1};
        }
        if (m == 0) continue;
        std::sort(li, li + m, [](const Interval& x, const Interval& y) { return x.a < y.a; });
        int nm = 0;
        for (int i = 0; i < m; ++i) {
          if (nm > 0 && li[i].a <= li[nm - 1].b) li[nm - 1].b = std::max(li[nm - 1].b, li[i].b);
          else li[nm++] = li[i];
        }
        if (!open) {
          for (int i = 0; i < nm; ++i) out[k] -= li[i].b - li[i].a;
          continue;
        }
        const Interval* pv = part_at(k);
        const int mp = part_count(k);
        for (int i = 0; i < nm; ++i)
          for (int j = 0; j < mp; ++j) out[k] -= std::max(0.0, std::min(li[i].b, pv[j].b) - std::max(li[i].a, pv[j].a));
      }
    }
  };
  if (!sc.closed_unions.empty()) unions(sc.closed_unions, false);
  if (!sc.open_unions.empty()) unions(sc.open_unions, true);
  for (int k = 0; k < n; ++k)
    if (!touched || touched[k]) out[k] = std::max(0.0, out[k]) * sc.mu;
  for (const Ellipse2D& e : sc.markers) {
    const EllipseAtAngle ea(e, ct, st, t0, dt, n);
    for (int k = ea.k0; k <= ea.k1; ++k) out[k] += e.value * ea.chord(t0 + k * dt);
  }
}

// Flags the rays that a pore, a lobe or a marker of the scene reaches at angle theta (the ranges
// scene_line_integrals walks): the other rays see the part alone.
void mark_shadows(const Scene& sc, double theta, double t0, double dt, int n, uint8_t* touched) {
  const double ct = std::cos(theta), st = std::sin(theta);
  const auto mark = [&](int k0, int k1) {
    if (k0 <= k1) std::fill(touched + k0, touched + k1 + 1, uint8_t(1));
  };
  const auto one = [&](const Ellipse2D& e) {
    const EllipseAtAngle ea(e, ct, st, t0, dt, n);
    mark(ea.k0, ea.k1);
  };
  const auto unions = [&](const std::vector<std::vector<Ellipse2D>>& list) {
    for (const auto& u : list) {  // the range the union walks: from its lowest to its highest lobe
      int k0 = n, k1 = -1;
      for (const Ellipse2D& e : u) {
        const EllipseAtAngle ea(e, ct, st, t0, dt, n);
        k0 = std::min(k0, ea.k0);
        k1 = std::max(k1, ea.k1);
      }
      mark(k0, k1);
    }
  };
  for (const Ellipse2D& e : sc.closed) one(e);
  for (const Ellipse2D& e : sc.open) one(e);
  unions(sc.closed_unions);
  unions(sc.open_unions);
  for (const Ellipse2D& e : sc.markers) one(e);
}

// Which part shapes cut the plane of a scene, per sub-plane of a slice: scenes with the same key
// have the same part cross-section.
std::string part_key(const Phantom& ph, const std::vector<double>& planes) {
  std::string key;
  for (double z : planes)
    for (const Shape& s : ph.shapes) {
      const double h = s.kind == "box" ? s.size_mm[2] / 2 : s.height_mm / 2;
      key += std::abs(z - s.centre_mm[2]) >= h ? '0' : '1';
    }
  return key;
}

}  // namespace

// What slice_transmission derives from the recipe and the geometry, shared by it and
// SliceTransmissions so that both compute every value by the same expressions.
struct SliceTransmissions::Setup {
  const Phantom& ph;
  const Recipe& r;
  ParallelGeometry g;
  int md, ma, nf;
  double s, dt, t0, step, norm;
  std::vector<double> ker;  // detector PSF: normalised Gaussian, sigma in bins, cut at 3 sigma
  Setup(const Phantom& ph_, const Recipe& r_, const ParallelGeometry& g_)
      : ph(ph_), r(r_), g(g_), md(r_.detector_subsamples), ma(r_.angular_blur > 0 ? 4 : 1) {
    s = r.voxel_mm();
    nf = g.bins * md;
    dt = g.bin_mm / md, t0 = g.bin_t_mm(0) + (0.5 / md - 0.5) * g.bin_mm;
    step = g.arc_deg * M_PI / 180 / g.angles;
    norm = 1.0 / (md * md * ma);
    const double sig = r.detector_blur_um * 1e-3 / g.bin_mm;
    if (sig > 0) {
      const int rad = std::max(1, int(std::ceil(3 * sig)));
      double sum = 0;
      for (int k = -rad; k <= rad; ++k) ker.push_back(std::exp(-0.5 * k * k / (sig * sig))), sum += ker.back();
      for (double& v : ker) v /= sum;
    }
  }
  std::vector<double> planes(int64_t z) const {
    const double zc = ph.grid.origin_mm[2] + double(z) * s;
    std::vector<double> out;
    for (int j = 0; j < md; ++j) out.push_back(zc + ((j + 0.5) / md - 0.5) * s);
    return out;
  }
  std::vector<Scene> scenes(const std::vector<double>& planes) const {
    std::vector<Scene> out;
    for (double z : planes) out.push_back(scene_at(ph, z));
    return out;
  }
  double theta(int i, int a) const { return g.angle_rad(i) + ((a + 0.5) / ma - 0.5) * r.angular_blur * step; }
  // acc[k] += exp(-p) over the sub-angles, scenes and sub-rays of bin k, in that order; only the
  // flagged bins (every sub-ray of a flagged bin is flagged in `touched`) when touched is given.
  void accumulate(const std::vector<Scene>& scenes, int i, double* acc, std::vector<double>& p,
                  const uint8_t* touched, const uint8_t* bin_touched) const {
    for (int a = 0; a < ma; ++a) {
      const double th = theta(i, a);
      for (const Scene& sc : scenes) {
        scene_line_integrals(sc, th, t0, dt, nf, p.data(), touched);
        for (int k = 0; k < g.bins; ++k) {
          if (bin_touched && !bin_touched[k]) continue;
          for (int j = 0; j < md; ++j) acc[size_t(k)] += std::exp(-p[size_t(k * md + j)]);
        }
      }
    }
  }
  void finish_row(const double* acc, float* row) const {
    if (ker.empty()) {
      for (int k = 0; k < g.bins; ++k) row[k] = float(acc[size_t(k)] * norm);
    } else {
      const int rad = int(ker.size() / 2);
      for (int k = 0; k < g.bins; ++k) {
        double v = 0;
        for (int j = -rad; j <= rad; ++j) v += ker[size_t(j + rad)] * acc[size_t(std::clamp(k + j, 0, g.bins - 1))];
        row[k] = float(v * norm);
      }
    }
  }
};

void phantom_line_integrals(const Phantom& ph, double z, double theta, double t0, double dt, int n, double* out) {
  scene_line_integrals(scene_at(ph, z), theta, t0, dt, n, out);
}

Sinogram phantom_sinogram(const Phantom& ph, double z, const ParallelGeometry& g) {
  const Scene sc = scene_at(ph, z);
  Sinogram s(g);
  std::vector<double> p(size_t(g.bins));
  for (int i = 0; i < g.angles; ++i) {
    scene_line_integrals(sc, g.angle_rad(i), g.bin_t_mm(0), g.bin_mm, g.bins, p.data());
    for (int k = 0; k < g.bins; ++k) s.row(i)[k] = float(p[size_t(k)]);
  }
  return s;
}

Sinogram slice_transmission(const Phantom& ph, const Recipe& r, const ParallelGeometry& g, int64_t z) {
  const SliceTransmissions::Setup st(ph, r, g);
  const std::vector<Scene> scenes = st.scenes(st.planes(z));
  std::vector<double> p(size_t(st.nf)), acc(size_t(g.bins));
  Sinogram out(g);
  for (int i = 0; i < g.angles; ++i) {
    std::fill(acc.begin(), acc.end(), 0.0);
    st.accumulate(scenes, i, acc.data(), p, nullptr, nullptr);
    st.finish_row(acc.data(), out.row(i));
  }
  return out;
}

SliceTransmissions::SliceTransmissions(const Phantom& ph, const Recipe& r, const ParallelGeometry& g, int64_t z0,
                                       int64_t z1, bool parallel)
    : st_(std::make_unique<Setup>(ph, r, g)) {
  // One table per part cross-section met in [z0, z1): the part alone, every angle, before the
  // normalisation and the PSF. Too many (a part of many shapes): none, every slice computed whole.
  std::vector<std::string> keys;
  for (int64_t z = z0; z < z1; ++z) {
    const std::string k = part_key(ph, st_->planes(z));
    if (std::find(keys.begin(), keys.end(), k) == keys.end()) keys.push_back(k);
  }
  const double bytes = double(keys.size()) * g.angles * g.bins * sizeof(double);
  if (bytes > 256.0 * (1 << 20)) return;
  for (const std::string& k : keys) {
    // The scenes of the first slice with this key, pores and markers left out.
    int64_t z = z0;
    while (part_key(ph, st_->planes(z)) != k) ++z;
    std::vector<Scene> scenes = st_->scenes(st_->planes(z));
    for (Scene& sc : scenes) {
      sc.closed.clear(), sc.open.clear(), sc.markers.clear();
      sc.closed_unions.clear(), sc.open_unions.clear();
    }
    std::vector<double>& t = tables_[k];
    t.assign(size_t(g.angles) * size_t(g.bins), 0.0);
#pragma omp parallel if (parallel)
    {
      std::vector<double> p(size_t(st_->nf));
#pragma omp for schedule(static)
      for (int i = 0; i < g.angles; ++i) st_->accumulate(scenes, i, t.data() + size_t(i) * size_t(g.bins), p, nullptr, nullptr);
    }
  }
}

SliceTransmissions::~SliceTransmissions() = default;

Sinogram SliceTransmissions::operator()(int64_t z) const {
  const Setup& st = *st_;
  const std::vector<double> planes = st.planes(z);
  const auto table = tables_.find(part_key(st.ph, planes));
  if (table == tables_.end()) return slice_transmission(st.ph, st.r, st.g, z);
  const std::vector<Scene> scenes = st.scenes(planes);
  const int bins = st.g.bins, md = st.md;
  std::vector<double> p(static_cast<size_t>(st.nf)), acc(static_cast<size_t>(bins));
  std::vector<uint8_t> rays(static_cast<size_t>(st.nf)), hit(static_cast<size_t>(bins));
  Sinogram out(st.g);
  for (int i = 0; i < st.g.angles; ++i) {
    // The bins a pore or a marker reaches at any sub-angle and in any sub-plane: computed whole
    // (every term of their sums, in the same order); the others are the part's own, from the table.
    std::fill(rays.begin(), rays.end(), uint8_t(0));
    for (int a = 0; a < st.ma; ++a)
      for (const Scene& sc : scenes) mark_shadows(sc, st.theta(i, a), st.t0, st.dt, st.nf, rays.data());
    bool any = false;
    for (int k = 0; k < bins; ++k) {
      uint8_t h = 0;
      for (int j = 0; j < md; ++j) h |= rays[size_t(k * md + j)];
      hit[size_t(k)] = h;
      any |= h != 0;
    }
    const double* part = table->second.data() + size_t(i) * size_t(bins);
    if (any) {
      for (int k = 0; k < bins; ++k) {
        acc[size_t(k)] = hit[size_t(k)] ? 0.0 : part[k];
        for (int j = 0; j < md; ++j) rays[size_t(k * md + j)] = hit[size_t(k)];
      }
      st.accumulate(scenes, i, acc.data(), p, rays.data(), hit.data());
      st.finish_row(acc.data(), out.row(i));
    } else {
      st.finish_row(part, out.row(i));
    }
  }
  return out;
}

namespace {

// float(log_transmission(c, i0)) for the whole counts c a Poisson draw gives (no electronic
// noise), looked up: the same expression, evaluated once per count up to i0 + 12 sqrt(i0) (counts
// above, and fractional ones, are computed as they come).
struct LogTable {
  double i0;
  std::vector<float> v;
  LogTable(double i0_, bool whole_counts) : i0(i0_) {
    if (!whole_counts) return;
    const double n = i0 + 12 * std::sqrt(i0) + 64;
    if (n > 8e6) return;  // larger doses: not worth 32 MB
    v.resize(size_t(n));
    for (size_t c = 0; c < v.size(); ++c) v[c] = float(log_transmission(double(c), i0));
  }
  float at(double counts) const {
    if (counts >= 0 && counts < double(v.size()) && counts == std::floor(counts)) return v[size_t(counts)];
    return float(log_transmission(counts, i0));
  }
};

}  // namespace

VolumeF simulate_scan(const Phantom& ph, const Recipe& r, const ScanSpec& spec) {
  return std::move(simulate_scans(ph, r, {spec})[0]);
}

std::vector<VolumeF> simulate_scans(const Phantom& ph, const Recipe& r, const std::vector<ScanSpec>& specs) {
  if (specs.empty()) return {};
  const int projections = specs[0].projections;
  if (projections < 1) throw InputError("scan: projections = " + std::to_string(projections) + " must be >= 1");
  std::vector<double> i0s;
  for (const ScanSpec& sp : specs) {
    if (sp.projections != projections) throw InputError("scan: simulate_scans wants one projection count");
    if (!(sp.i0 > 0)) throw InputError("scan: i0 = " + std::to_string(sp.i0) + " must be > 0");
    i0s.push_back(sp.i0);
  }
  const ParallelGeometry g = scan_geometry(r, projections);
  const Geometry& vg = ph.grid;
  std::vector<VolumeF> out;
  for (size_t d = 0; d < i0s.size(); ++d) out.emplace_back(vg, Uninitialized{});  // every slice set below
  std::vector<LogTable> logs;
  for (double i0 : i0s) logs.emplace_back(i0, r.noise && !(r.electronic_noise > 0));
  const RampWindow win = parse_window(r.filter);
  const int64_t nz = vg.dims[2];
  const int nx = int(vg.dims[0]), ny = int(vg.dims[1]);
  const SliceTransmissions transmission(ph, r, g, 0, nz);
#pragma omp parallel
  {
    Fbp fbp(g, win);
    Sinogram sino(g);
#pragma omp for schedule(static)
    for (int64_t z = 0; z < nz; ++z) {
      const Sinogram T = transmission(z);
      for (size_t d = 0; d < i0s.size(); ++d) {
        const double i0 = i0s[d];
        uint64_t bits;
        std::memcpy(&bits, &i0, sizeof bits);
        // One noise stream per (seed, projections, dose, slice).
        const uint64_t scan_key = mix_seed(mix_seed(r.seed ^ 0x5ca11ab1eULL, uint64_t(projections)), bits);
        Rng rng(mix_seed(specs[d].reference ? mix_seed(scan_key, 1) : scan_key, uint64_t(z)));
        Rng::PoissonMean mean(0);
        for (size_t k = 0; k < T.data.size(); ++k) {
          const double t = T.data[k];
          if (!r.noise) {
            sino.data[k] = float(-std::log(std::max(t, 1e-30)));
            continue;
          }
          if (i0 * t != mean.lam) mean = Rng::PoissonMean(i0 * t);  // rays through air repeat i0
          const double counts = detector_counts(rng, mean, r.electronic_noise);
          sino.data[k] = logs[d].at(counts);
        }
        fbp.filter(sino);
        float* dst = out[d].slice(z);
        std::fill(dst, dst + vg.slice_voxels(), 0.f);
        fbp.backproject(sino, nx, ny, r.voxel_mm(), dst, false);
      }
    }
  }
  return out;
}

}  // namespace pb::synth
