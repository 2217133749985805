// Segmentation by slabs (methods/streaming.hpp). Every step calls the kernel the in-memory path
// calls (compute_histogram, method_histogram, the method's calculator, air_below, median_filter,
// SliceMoments through local_air_by_slices, the run labelling, outside_components) on slabs, so
// that the mask is the in-memory mask voxel for voxel.
#include "methods/streaming.hpp"

#include <fcntl.h>
#include <omp.h>
#include <unistd.h>

#include <algorithm>
#include <array>
#include <cerrno>
#include <chrono>
#include <cmath>
#include <cstring>
#include <filesystem>
#include <map>
#include <memory>
#include <stdexcept>

#include "core/components.hpp"
#include "core/error.hpp"
#include "core/format.hpp"
#include "core/histogram.hpp"
#include "core/memory.hpp"
#include "methods/composition.hpp"
#include "methods/integral.hpp"
#include "methods/pores.hpp"
#include "methods/prefilter.hpp"
#include "methods/threshold.hpp"

namespace pb {

namespace {

// Float slabs of the volume, in z order: from the file, or through the median pre-filter.
class Slabs {
 public:
  virtual ~Slabs() = default;
  virtual const Geometry& geometry() const = 0;
  // Slices [z0, z1) into out (its buffer reused when it holds as many voxels).
  virtual void read(int64_t z0, int64_t z1, VolumeF& out) const = 0;
};

class FileSlabs : public Slabs {
 public:
  explicit FileSlabs(const SlabFile& f) : f_(f) {}
  const Geometry& geometry() const override { return f_.geometry(); }
  void read(int64_t z0, int64_t z1, VolumeF& out) const override { f_.read_float(z0, z1, out); }

 private:
  const SlabFile& f_;
};

// The median of slices [z0, z1): the slab with a halo of `radius` slices on each side (fewer at the
// volume's ends, where the filter mirrors as it does on the whole volume), filtered, halo dropped.
class MedianSlabs : public Slabs {
 public:
  MedianSlabs(const Slabs& in, int radius) : in_(in), r_(radius) {}
  const Geometry& geometry() const override { return in_.geometry(); }
  void read(int64_t z0, int64_t z1, VolumeF& out) const override {
    const int64_t nz = geometry().dims[2], a = std::max<int64_t>(0, z0 - r_), b = std::min(nz, z1 + r_);
    in_.read(a, b, src_);
    VolumeF f = median_filter(src_, r_);
    Geometry g = f.geometry();
    g.dims[2] = z1 - z0;
    g.origin_mm[2] += double(z0 - a) * g.spacing_mm[2];
    if (a == z0 && b == z1) {
      out = std::move(f);
      return;
    }
    if (out.geometry().dims != g.dims) out = VolumeF(g, Uninitialized{});
    out.set_geometry_keep_dims(g);
    std::memcpy(out.data(), f.slice(z0 - a), size_t(out.size()) * sizeof(float));
  }

 private:
  const Slabs& in_;
  int r_;
  mutable VolumeF src_;  // the slab with its halo, reused
};

// The slabs of a pre-filter kept after their first pass, so that the filter runs once although
// the method reads the volume twice (histogram, then air): slabs read in z order are written to an
// unlinked temporary file beside the output as whole grey levels of the stored type (the median of
// integer data is one of its values), and read back from there. The file lives in the page cache
// or on disk, not in the process's memory, and vanishes with the process however it ends.
class KeptSlabs : public Slabs {
 public:
  KeptSlabs(const Slabs& in, VoxelType stored, const std::string& dir) : in_(in), type_(stored) {
    fd_ = ::open(dir.c_str(), O_TMPFILE | O_RDWR | O_CLOEXEC, 0600);
    if (fd_ < 0) {  // no O_TMPFILE on this file system: a named file, unlinked at once
      std::string tmpl = (dir.empty() ? std::string(".") : dir) + "/.porebench-slabs-XXXXXX";
      fd_ = ::mkstemp(tmpl.data());
      if (fd_ >= 0) ::unlink(tmpl.c_str());
    }
  }
  ~KeptSlabs() override {
    if (fd_ >= 0) ::close(fd_);
  }
  const Geometry& geometry() const override { return in_.geometry(); }
  void read(int64_t z0, int64_t z1, VolumeF& out) const override {
    const int64_t nxy = geometry().slice_voxels(), width = voxel_type_bytes(type_);
    if (z1 <= kept_) {  // read back
      if (out.geometry().dims != slab_dims(z0, z1)) out = VolumeF(slab_geometry(z0, z1), Uninitialized{});
      out.set_geometry_keep_dims(slab_geometry(z0, z1));
      buf_.resize(size_t((z1 - z0) * nxy * width));
      if (!transfer(buf_.data(), buf_.size(), uint64_t(z0 * nxy * width), false))
        throw InputError("cannot read back the filtered slabs: " + std::string(std::strerror(errno)));
      with_type([&](auto zero) {
        using T = decltype(zero);
        const T* v = reinterpret_cast<const T*>(buf_.data());
        float* o = out.data();
        const int64_t n = out.size();
#pragma omp parallel for schedule(static)
        for (int64_t i = 0; i < n; ++i) o[i] = float(v[i]);
      });
      return;
    }
    in_.read(z0, z1, out);
    if (fd_ < 0 || z0 != kept_) return;  // not in order: not kept
    buf_.resize(size_t((z1 - z0) * nxy * width));
    with_type([&](auto zero) {
      using T = decltype(zero);
      T* v = reinterpret_cast<T*>(buf_.data());
      const float* f = out.data();
      const int64_t n = out.size();
#pragma omp parallel for schedule(static)
      for (int64_t i = 0; i < n; ++i) v[i] = T(f[i]);
    });
    if (transfer(buf_.data(), buf_.size(), uint64_t(z0 * nxy * width), true)) kept_ = z1;
  }

 private:
  template <class F> void with_type(F&& f) const {
    switch (type_) {
      case VoxelType::u8: return f(uint8_t{});
      case VoxelType::u16: return f(uint16_t{});
      case VoxelType::i16: return f(int16_t{});
      case VoxelType::f32: return f(float{});
    }
  }
  std::array<int64_t, 3> slab_dims(int64_t z0, int64_t z1) const { return slab_geometry(z0, z1).dims; }
  Geometry slab_geometry(int64_t z0, int64_t z1) const {
    Geometry g = geometry();
    g.dims[2] = z1 - z0;
    g.origin_mm[2] += double(z0) * g.spacing_mm[2];
    return g;
  }
  // All n bytes at off, read or written; false on an error or a full disk.
  bool transfer(uint8_t* p, size_t n, uint64_t off, bool write) const {
    while (n > 0) {
      const ssize_t r = write ? ::pwrite(fd_, p, n, off_t(off)) : ::pread(fd_, p, n, off_t(off));
      if (r < 0 && errno == EINTR) continue;
      if (r <= 0) return false;
      p += r, n -= size_t(r), off += uint64_t(r);
    }
    return true;
  }

  const Slabs& in_;
  VoxelType type_;
  int fd_ = -1;
  mutable int64_t kept_ = 0;  // slices [0, kept_) are in the file
  mutable std::vector<uint8_t> buf_;
};

template <class F>
void for_each_slab(const Slabs& s, int64_t slab, F&& f) {
  const int64_t nz = s.geometry().dims[2];
  VolumeF v;  // one buffer for every slab
  for (int64_t z = 0; z < nz; z += slab) {
    const int64_t z1 = std::min(nz, z + slab);
    s.read(z, z1, v);
    f(z, z1, static_cast<const VolumeF&>(v));
  }
}

// What a method takes from the whole volume: the statistics of every voxel and its histograms.
struct VolumeSummary {
  Stats all;
  HistogramOf hist;
};

// Integer grey values (integer volumes, and their medians): one pass counts every grey level; the
// statistics and any histogram follow exactly (core/histogram.hpp LevelCounts), as in memory.
VolumeSummary level_summary(const Slabs& s, VoxelType stored, int64_t slab) {
  auto levels = std::make_shared<LevelCounts>(stored);
  for_each_slab(s, slab, [&](int64_t, int64_t, const VolumeF& v) {
    if (!levels->add(v.data(), v.size())) throw std::logic_error("level_summary: a voxel is not a grey level of its type");
  });
  return {levels->stats(), [levels](double lo, double hi, int bins) { return levels->histogram(lo, hi, bins); }};
}

// Float grey values: a statistics pass now, and a pass over the slabs for each histogram asked for
// (counts are sums: exact). The mean is summed per slab (another order than in memory).
VolumeSummary float_summary(const Slabs& s, int64_t slab) {
  VolumeSummary out;
  double sum = 0, lo = INFINITY, hi = -INFINITY;
  for_each_slab(s, slab, [&](int64_t, int64_t, const VolumeF& v) {
    const Stats t = compute_stats(v);
    out.all.count += t.count;
    out.all.nan_count += t.nan_count;
    if (t.count == 0) return;
    lo = std::min(lo, t.min), hi = std::max(hi, t.max);
    sum += t.mean * double(t.count);
  });
  if (out.all.count > 0) out.all.min = lo, out.all.max = hi, out.all.mean = sum / double(out.all.count);
  out.hist = [&s, slab](double a, double b, int bins) {
    Histogram h;
    bool first = true;
    for_each_slab(s, slab, [&](int64_t, int64_t, const VolumeF& v) {
      const Histogram t = compute_histogram(v.data(), v.size(), a, b, bins);
      if (first) h = t, first = false;
      else
        for (int k = 0; k < bins; ++k) h.counts[size_t(k)] += t.counts[size_t(k)];
    });
    return h;
  };
  return out;
}

VolumeSummary summary(const Slabs& s, VoxelType stored, int64_t slab) {
  return stored == VoxelType::f32 ? float_summary(s, slab) : level_summary(s, stored, slab);
}

// Slices for SliceMoments: read a slab at a time in z order and kept while the window may still
// ask for them (keep slices behind the furthest one asked).
class SliceRing {
 public:
  SliceRing(const Slabs& s, int64_t slab, int64_t keep) : s_(s), slab_(slab), keep_(keep) {}
  const float* operator()(int64_t z) {
    const int64_t nxy = s_.geometry().slice_voxels();
    auto it = slabs_.upper_bound(z);
    if (it != slabs_.begin()) {
      --it;
      if (z < it->first + it->second.nz()) return it->second.data() + (z - it->first) * nxy;
    }
    if (z < furthest_ - keep_) throw std::logic_error("SliceRing: slice " + std::to_string(z) + " asked after it was dropped");
    const int64_t z0 = z / slab_ * slab_, z1 = std::min(s_.geometry().dims[2], z0 + slab_);
    furthest_ = std::max(furthest_, z1 - 1);
    for (auto e = slabs_.begin(); e != slabs_.end();) {  // drop slabs wholly behind the window
      if (e->first + e->second.nz() > furthest_ - keep_) {
        ++e;
        continue;
      }
      spare_ = std::move(e->second);  // its buffer serves the next slab
      e = slabs_.erase(e);
    }
    VolumeF& v = slabs_[z0];
    v = std::move(spare_);
    s_.read(z0, z1, v);
    return v.data() + (z - z0) * nxy;
  }

 private:
  const Slabs& s_;
  int64_t slab_, keep_, furthest_ = 0;
  std::map<int64_t, VolumeF> slabs_;
  VolumeF spare_;
};

// Pores from the runs of the air mask (as air_to_pores, no ROI), small pores removed (as
// run_method), the mask written by slabs to its temporary (the caller commits it).
std::unique_ptr<SlabMaskWriter> finish_pores(RunCollector& air, const ParamValues& base, const std::string& output, int64_t slab,
                                             const std::string& no_part_setting, const std::string& method, SlabSegmentResult& r) {
  LabelRuns c = air.finish(6);
  const Geometry g = c.geometry;
  const std::vector<uint8_t> outside = outside_components(c, nullptr);
  LabelRuns p;
  p.geometry = g;
  p.row_begin.assign(c.row_begin.size(), 0);
  int64_t background = 0;
  const int64_t nrows = c.rows();
  for (int64_t row = 0; row < nrows; ++row) {
    for (int64_t i = c.row_begin[size_t(row)]; i < c.row_begin[size_t(row) + 1]; ++i) {
      const Run& u = c.runs[size_t(i)];
      if (outside[c.label[size_t(i)]]) {
        background += u.x1 - u.x0;
      } else {
        p.runs.push_back(u);
      }
    }
    p.row_begin[size_t(row) + 1] = int64_t(p.runs.size());
  }
  c = LabelRuns();
  r.part_voxels = g.voxels() - background;
  if (r.part_voxels == 0 && !no_part_setting.empty()) r.warnings.push_back(no_part_voxels_warning(method, no_part_setting));
  std::vector<uint8_t> keep;
  const int64_t min_voxels = base.integer("min_pore_voxels");
  p = relabel_runs(std::move(p), 26);
  keep.assign(size_t(p.count) + 1, 1);
  if (min_voxels > 1) {
    int64_t removed = 0;
    for (uint32_t k = 1; k <= p.count; ++k) {
      keep[k] = p.sizes[k] >= min_voxels;
      removed += !keep[k];
    }
    r.chosen.emplace_back("small_pores_removed", double(removed));
  }
  for (uint32_t k = 1; k <= p.count; ++k) r.pore_voxels += keep[k] ? p.sizes[k] : 0;
  auto w = std::make_unique<SlabMaskWriter>(output, g);
  const int64_t nx = g.dims[0], ny = g.dims[1], nz = g.dims[2];
  std::vector<uint8_t> buf;
  for (int64_t z0 = 0; z0 < nz; z0 += slab) {
    const int64_t z1 = std::min(nz, z0 + slab);
    buf.assign(size_t((z1 - z0) * g.slice_voxels()), 0);
    for (int64_t row = z0 * ny; row < z1 * ny; ++row)
      for (int64_t i = p.row_begin[size_t(row)]; i < p.row_begin[size_t(row) + 1]; ++i)
        if (keep[p.label[size_t(i)]]) {
          const Run& u = p.runs[size_t(i)];
          std::fill(buf.begin() + (row - z0 * ny) * nx + u.x0, buf.begin() + (row - z0 * ny) * nx + u.x1, uint8_t(1));
        }
    w->write(buf.data(), z1 - z0);
  }
  return w;  // committed by the caller, after opt.before_commit
}

int64_t default_slab(const Geometry& g) {
  const int64_t per = std::max<int64_t>(1, g.slice_voxels() * int64_t(sizeof(float)));
  return std::clamp<int64_t>((int64_t(256) << 20) / per, 1, std::max<int64_t>(1, g.dims[2]));
}

}  // namespace

uint64_t segment_memory_bytes(const Geometry& g, VoxelType stored, const std::string& method) {
  const uint64_t filters = uint64_t(composition_stages(method).size() - 1);
  const uint64_t per_voxel = uint64_t(voxel_type_bytes(stored)) + 4 + 4 * filters + 3;
  return saturating_product({uint64_t(std::max<int64_t>(0, g.voxels())), per_voxel});
}

std::string slab_refusal_of_method(const std::string& method, bool roi) {
  const std::vector<std::string> parts = composition_stages(method);
  for (size_t i = 0; i + 1 < parts.size(); ++i)
    if (parts[i] != "median") return "pre-filter " + parts[i] + " is not applied by slabs (median is)";
  const std::string& base = parts.back();
  if (!histogram_decider(base) && !local_method_by_slices(base))
    return "method " + base + " does not run by slabs (the histogram methods and, of the local methods, " +
           kLocalMethodsBySlices + " do)";
  if (roi) return "an ROI (--roi) is not read by slabs";
  return "";
}

SegmentPlan plan_segment(const std::string& input, const ReadOptions& ro, const std::string& method, bool roi,
                         uint64_t limit) {
  SegmentPlan plan;
  Geometry g;
  VoxelType t = VoxelType::u8;
  if (!volume_size_from_header(input, ro, g, t)) return plan;
  plan.need_bytes = segment_memory_bytes(g, t, method);
  if (plan.need_bytes <= limit) return plan;
  std::string why = slab_refusal_of_method(method, roi);
  if (why.empty()) {
    why = slab_read_refusal(input, ro);
    if (!why.empty()) why += " (porebench convert writes an uncompressed .mha)";
  }
  if (!why.empty())
    throw InputError("input " + input + " (" + size_text(g, t) + ") needs about " + bytes_text(plan.need_bytes) +
                     " to segment with " + method + " in memory, above --memory-limit " + bytes_text(limit) +
                     ", and cannot be segmented by slabs: " + why);
  plan.by_slabs = true;
  return plan;
}

SlabSegmentResult segment_by_slabs(const std::string& method, const ParamValues& params, const SlabFile& in,
                                   const std::string& output, const SlabSegmentOptions& opt) {
  const std::string why = slab_refusal_of_method(method, false);
  if (!why.empty()) throw InputError("segment " + method + " of " + in.path() + " by slabs: " + why);
  const auto t0 = std::chrono::steady_clock::now();
  const Registry& reg = Registry::instance();
  const std::vector<std::string> parts = composition_stages(method);
  const MethodInfo& base_info = *reg.find(parts.back());
  const ParamValues base = stage_params(base_info.params, "", params);
  const Geometry& g = in.geometry();
  SlabSegmentResult r;
  r.slab_slices = opt.slab_slices > 0 ? std::min<int64_t>(opt.slab_slices, std::max<int64_t>(1, g.dims[2])) : default_slab(g);
  const int64_t slab = r.slab_slices;
  in.check_finite();

  // The chain of slab sources: the file, then each median.
  FileSlabs file(in);
  std::vector<std::unique_ptr<MedianSlabs>> medians;
  const Slabs* src = &file;
  for (size_t i = 0; i + 1 < parts.size(); ++i) {
    const FilterInfo& f = *reg.find_filter(parts[i]);
    const ParamValues fp = stage_params(f.params, f.name + ".", params);
    medians.push_back(std::make_unique<MedianSlabs>(*src, int(fp.integer("radius"))));
    src = medians.back().get();
  }
  std::unique_ptr<KeptSlabs> kept;
  if (parts.size() > 1) {
    const std::string dir = std::filesystem::path(output).parent_path().string();
    kept = std::make_unique<KeptSlabs>(*src, in.type(), dir.empty() ? "." : dir);
    src = kept.get();
  }
  // Composed methods see float data (Registry::compose); the grey levels stay whole numbers.
  const VoxelType hist_type = parts.size() > 1 ? VoxelType::f32 : in.type();
  const VolumeSummary sum = summary(*src, in.type(), slab);
  RunCollector air(g);
  std::unique_ptr<SlabMaskWriter> mask;

  if (const HistogramDecider* decide = histogram_decider(parts.back())) {
    const Histogram h = method_histogram(sum.all, false, hist_type, base, sum.hist);
    const HistogramDecision d = (*decide)(h, hist_type, [&sum] { return sum.all.min; }, base);
    const ThresholdChoice& c = d.choice;
    std::vector<uint8_t> a;
    for_each_slab(*src, slab, [&](int64_t, int64_t, const VolumeF& v) {
      a.resize(size_t(v.size()));
      air_below(v.data(), v.size(), c.threshold, nullptr, a.data());
      air.add(a.data(), v.nz());
    });
    r.chosen.emplace_back("threshold", c.threshold);
    r.warnings = c.warnings;
    mask = finish_pores(air, base, output, slab, "threshold " + format_number(c.threshold, 6), method, r);
    r.chosen.insert(r.chosen.begin() + 1, d.chosen.begin(), d.chosen.end());
  } else {
    // a local method: the window asks slices in z order, at most window + 2 batches behind the furthest.
    const int64_t w = base.integer("window");
    SliceRing ring(*src, std::min<int64_t>(slab, 8), w + 2 * 8 + 2);
    LocalAir a = local_air_by_slices(parts.back(), base, g, sum.all, sum.hist, std::ref(ring),
                                     [&air](int64_t, int64_t n, const uint8_t* slices) { air.add(slices, n); });
    r.chosen = std::move(a.chosen);
    r.warnings = std::move(a.warnings);
    mask = finish_pores(air, base, output, slab, "", method, r);
  }
  r.runtime_s = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  if (opt.before_commit) opt.before_commit(r);
  mask->commit();
  return r;
}

}  // namespace pb
