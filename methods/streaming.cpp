// Segmentation by slabs (methods/streaming.hpp). Every step calls the kernel the in-memory path
// calls (compute_histogram, median_filter's median_filter_slices, the method's own air through its
// MethodInfo::slabs (methods/slab_method.hpp), the run labelling, outside_components) on slabs, so
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
#include "methods/slab_method.hpp"
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
// volume's ends, where the filter mirrors as it does on the whole volume), filtered into out at
// those slices only (the halo is read, not filtered; out's buffer is reused).
class MedianSlabs : public Slabs {
 public:
  MedianSlabs(const Slabs& in, int radius) : in_(in), r_(radius) {}
  const Geometry& geometry() const override { return in_.geometry(); }
  void read(int64_t z0, int64_t z1, VolumeF& out) const override {
    const int64_t nz = geometry().dims[2], a = std::max<int64_t>(0, z0 - r_), b = std::min(nz, z1 + r_);
    in_.read(a, b, src_);
    shape_slab(out, geometry(), z0, z1);
    median_filter_slices(src_, r_, z0 - a, z1 - a, out.data());
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
      shape_slab(out, geometry(), z0, z1);
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

// The ROI mask by slices (nullptr: no ROI), read from its file into one reused buffer.
class RoiSlabs {
 public:
  explicit RoiSlabs(const SlabFile* f) : f_(f) {}
  explicit operator bool() const { return f_ != nullptr; }
  // Slices [z0, z1), valid until the next call; nullptr without an ROI.
  const uint8_t* get(int64_t z0, int64_t z1) {
    if (!f_) return nullptr;
    f_->read_mask(z0, z1, buf_);
    return buf_.data();
  }

 private:
  const SlabFile* f_;
  Mask buf_;
};

// f(z0, z1, slab, roi slices or nullptr) for every slab in z order.
template <class F>
void for_each_slab(const Slabs& s, int64_t slab, RoiSlabs* roi, F&& f) {
  const int64_t nz = s.geometry().dims[2];
  VolumeF v;  // one buffer for every slab
  for (int64_t z = 0; z < nz; z += slab) {
    const int64_t z1 = std::min(nz, z + slab);
    s.read(z, z1, v);
    f(z, z1, static_cast<const VolumeF&>(v), roi ? roi->get(z, z1) : nullptr);
  }
}

// What a method takes from the whole volume: the statistics of every voxel and its histograms, and
// the same of the voxels inside the ROI (part, part_hist: of every voxel without an ROI).
struct VolumeSummary {
  Stats all, part;
  HistogramOf hist, part_hist;
};

// Integer grey values (integer volumes, and their medians): one pass counts every grey level (and
// those inside the ROI); the statistics and any histogram follow exactly (core/histogram.hpp
// LevelCounts), as in memory.
VolumeSummary level_summary(const Slabs& s, VoxelType stored, int64_t slab, RoiSlabs& roi) {
  auto levels = std::make_shared<LevelCounts>(stored), inside = roi ? std::make_shared<LevelCounts>(stored) : levels;
  for_each_slab(s, slab, &roi, [&](int64_t, int64_t, const VolumeF& v, const uint8_t* r) {
    if (!levels->add(v.data(), v.size()) || (r && !inside->add(v.data(), v.size(), r)))
      throw std::logic_error("level_summary: a voxel is not a grey level of its type");
  });
  auto hist_of = [](std::shared_ptr<LevelCounts> l) {
    return HistogramOf([l](double lo, double hi, int bins) { return l->histogram(lo, hi, bins); });
  };
  return {levels->stats(), inside->stats(), hist_of(levels), hist_of(inside)};
}

// Float grey values: a statistics pass now, and a pass over the slabs for each histogram asked for
// (counts are sums: exact). The mean is summed per slab (another order than in memory).
VolumeSummary float_summary(const Slabs& s, int64_t slab, RoiSlabs& roi) {
  struct Sum {
    Stats s;
    double sum = 0, lo = INFINITY, hi = -INFINITY;
    void add(const Stats& t) {
      s.count += t.count;
      s.nan_count += t.nan_count;
      if (t.count == 0) return;
      lo = std::min(lo, t.min), hi = std::max(hi, t.max);
      sum += t.mean * double(t.count);
    }
    Stats stats() const {
      Stats o = s;
      if (o.count > 0) o.min = lo, o.max = hi, o.mean = sum / double(o.count);
      return o;
    }
  } all, inside;
  for_each_slab(s, slab, &roi, [&](int64_t, int64_t, const VolumeF& v, const uint8_t* r) {
    all.add(compute_stats(v));
    if (r) inside.add(compute_stats(v.data(), v.size(), r));
  });
  auto hist_of = [&s, slab, &roi](bool masked) {
    return HistogramOf([&s, slab, &roi, masked](double a, double b, int bins) {
      Histogram h;
      bool first = true;
      for_each_slab(s, slab, masked ? &roi : nullptr, [&](int64_t, int64_t, const VolumeF& v, const uint8_t* r) {
        const Histogram t = compute_histogram(v.data(), v.size(), a, b, bins, r);
        if (first) h = t, first = false;
        else
          for (int k = 0; k < bins; ++k) h.counts[size_t(k)] += t.counts[size_t(k)];
      });
      return h;
    });
  };
  VolumeSummary out{all.stats(), roi ? inside.stats() : all.stats(), hist_of(false), hist_of(bool(roi))};
  return out;
}

VolumeSummary summary(const Slabs& s, VoxelType stored, int64_t slab, RoiSlabs& roi) {
  return stored == VoxelType::f32 ? float_summary(s, slab, roi) : level_summary(s, stored, slab, roi);
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

// The open mask of pore extraction (air, or outside the ROI: as air_to_pores) collected as runs
// slab by slab, and beside it the runs of the voxels outside the ROI, so that the ROI is read once
// (one slab at a time, as the air comes) for both.
class OpenMask {
 public:
  OpenMask(const Geometry& g, const SlabFile* roi) : open_(g), roi_(roi), nxy_(g.slice_voxels()) {
    if (roi) out_of_roi_ = std::make_unique<RunCollector>(g);
  }
  // The air of slices [z0, z0 + n), in z order (not cut to the ROI: the voxels outside it are open
  // either way).
  void add(int64_t z0, int64_t n, const uint8_t* air) {
    if (!roi_) return open_.add(air, n);
    const uint8_t* r = roi_.get(z0, z0 + n);
    const int64_t k = n * nxy_;
    buf_.resize(size_t(2 * k));
    uint8_t *o = buf_.data(), *q = o + k;
#pragma omp parallel for schedule(static)
    for (int64_t i = 0; i < k; ++i) {
      q[i] = !r[i];
      o[i] = air[i] || q[i];
    }
    open_.add(o, n);
    out_of_roi_->add(q, n);
  }
  // After the last slice: the 6-connected components of the open mask, and per label whether it is
  // background (outside_components: the rule of air_to_pores).
  LabelRuns finish(std::vector<uint8_t>& outside) {
    LabelRuns c = open_.finish(6);
    outside = out_of_roi_ ? outside_components(c, out_of_roi_->finish(6)) : outside_components(c, nullptr);
    return c;
  }

 private:
  RunCollector open_;
  RoiSlabs roi_;
  int64_t nxy_;
  std::unique_ptr<RunCollector> out_of_roi_;
  std::vector<uint8_t> buf_;
};

// Pores from the runs of the open mask (as air_to_pores: a component reaching the border or holding
// a voxel outside the ROI is background; the part is what no background component holds), small
// pores removed (as run_method), the mask written by slabs to its temporary (the caller commits it).
std::unique_ptr<SlabMaskWriter> finish_pores(OpenMask& open, const ParamValues& base, const std::string& output,
                                             int64_t slab, const std::string& no_part_setting, const std::string& method,
                                             SlabSegmentResult& r) {
  std::vector<uint8_t> outside;
  LabelRuns c = open.finish(outside);
  const Geometry g = c.geometry;
  const int64_t nx = g.dims[0], ny = g.dims[1], nz = g.dims[2];
  r.part_voxels = part_voxels(c, outside);
  LabelRuns p;
  p.geometry = g;
  p.row_begin.assign(c.row_begin.size(), 0);
  const int64_t nrows = c.rows();
  for (int64_t row = 0; row < nrows; ++row) {
    for (int64_t i = c.row_begin[size_t(row)]; i < c.row_begin[size_t(row) + 1]; ++i)
      if (!outside[c.label[size_t(i)]]) p.runs.push_back(c.runs[size_t(i)]);
    p.row_begin[size_t(row) + 1] = int64_t(p.runs.size());
  }
  c = LabelRuns();
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

// About 16 MiB of float voxels per slab, at least 2 slices (segment_by_slabs takes at least twice the
// halo of a window filter: bernsen, local-gaussian, window/2 slices each side). Small slabs stay in cache from one
// step to the next (read, median, level counts, kept copy) and their buffers are reused: measured
// on 512^3 and 2048 x 2048 x 64 (median+otsu), slabs of 4-32 MiB ran 1.5-2x faster than slabs of
// 256 MiB (notes of issue 17).
int64_t default_slab(const Geometry& g) {
  const int64_t per = std::max<int64_t>(1, g.slice_voxels() * int64_t(sizeof(float)));
  return std::max((int64_t(16) << 20) / per, int64_t(2));
}

}  // namespace

uint64_t segment_memory_bytes(const Geometry& g, VoxelType stored, const std::string& method) {
  const uint64_t filters = uint64_t(composition_stages(method).size() - 1);
  const uint64_t per_voxel = uint64_t(voxel_type_bytes(stored)) + 4 + 4 * filters + 3;
  return saturating_product({uint64_t(std::max<int64_t>(0, g.voxels())), per_voxel});
}

void check_slab_roi(const SlabFile& in, const SlabFile& roi) {
  check_same_geometry(in.geometry(), in.path(), roi.geometry(), roi.path());
  const Geometry& g = roi.geometry();
  const int64_t step = std::max<int64_t>(1, (int64_t(64) << 20) / std::max<int64_t>(1, g.slice_voxels()));
  Mask m;
  for (int64_t z = 0; z < g.dims[2]; z += step) {
    roi.read_mask(z, std::min(g.dims[2], z + step), m);
    if (count_nonzero(m) > 0) return;
  }
  throw InputError("ROI " + roi.path() + " is empty: it has no non-zero voxel, so no voxel would be classified");
}

std::string slab_refusal_of_method(const std::string& method) {
  const std::vector<std::string> parts = composition_stages(method);
  for (size_t i = 0; i + 1 < parts.size(); ++i)
    if (parts[i] != "median") return "pre-filter " + parts[i] + " is not applied by slabs (median is)";
  const Registry& reg = Registry::instance();
  const std::string& base = parts.back();
  const MethodInfo* m = reg.find(base);
  if (m && m->slabs) return "";
  std::string streams;
  for (const MethodInfo* k : reg.all())
    if (k->slabs) streams += (streams.empty() ? "" : ", ") + k->name;
  return "method " + base + " does not run by slabs (these do: " + streams + ")";
}

SegmentPlan plan_segment(const std::string& input, const ReadOptions& ro, const std::string& method,
                         const std::string& roi, uint64_t limit) {
  SegmentPlan plan;
  Geometry g;
  VoxelType t = VoxelType::u8;
  if (!volume_size_from_header(input, ro, g, t)) return plan;
  plan.need_bytes = segment_memory_bytes(g, t, method);
  if (!roi.empty()) plan.need_bytes += uint64_t(std::max<int64_t>(0, g.voxels()));  // the part mask
  if (plan.need_bytes <= limit) return plan;
  std::string why = slab_refusal_of_method(method);
  if (why.empty()) {
    why = slab_read_refusal(input, ro);
    if (why.empty() && !roi.empty()) {
      why = slab_read_refusal(roi, ReadOptions{});
      if (!why.empty()) why = "the ROI " + roi + " cannot be read by slabs: " + why;
    }
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
  const std::string why = slab_refusal_of_method(method);
  if (!why.empty()) throw InputError("segment " + method + " of " + in.path() + " by slabs: " + why);
  if (opt.roi) check_slab_roi(in, *opt.roi);
  const auto t0 = std::chrono::steady_clock::now();
  const Registry& reg = Registry::instance();
  const std::vector<std::string> parts = composition_stages(method);
  const MethodInfo& base_info = *reg.find(parts.back());
  const SlabMethod& method_slabs = *base_info.slabs;
  const ParamValues base = stage_params(base_info.params, "", params);
  const Geometry& g = in.geometry();
  if (method_slabs.check) method_slabs.check(base, g);  // before any pass over the file
  SlabSegmentResult r;
  const int64_t halo = method_slabs.halo ? method_slabs.halo(base) : 0;
  r.slab_slices = opt.slab_slices > 0 ? opt.slab_slices : default_slab(g);
  if (r.slab_slices < 2 * halo) {  // a thinner slab reads and filters each slice more than twice
    if (opt.slab_slices > 0)
      r.slab_note = "--slab-slices " + std::to_string(opt.slab_slices) + " raised to " + std::to_string(2 * halo) +
                  ": method " + parts.back() + " reads " + std::to_string(halo) +
                  " slices beyond each face of a slab (its window/2), so thinner slabs would read and filter every "
                  "slice more than twice";
    r.slab_slices = 2 * halo;
  }
  r.slab_slices = std::clamp<int64_t>(r.slab_slices, 1, std::max<int64_t>(1, g.dims[2]));
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
  RoiSlabs roi(opt.roi);  // the summary's read of the ROI; the air pass's is OpenMask's
  const VolumeSummary sum = summary(*src, in.type(), slab, roi);

  // The method's source: slabs, or passes of slices in z order for the window sums, which ask at
  // most window + 2 batches behind the furthest slice.
  SlabSource slabs;
  slabs.geometry = g;
  slabs.read = [src](int64_t z0, int64_t z1, VolumeF& v) { src->read(z0, z1, v); };
  slabs.slices = [src, slab](int64_t window) {
    auto ring = std::make_shared<SliceRing>(*src, std::min<int64_t>(slab, 8), window + 2 * 8 + 2);
    return SliceOf([ring](int64_t z) { return (*ring)(z); });
  };
  slabs.slab = slab;
  // Composed methods see float data (Registry::compose); the grey levels stay whole numbers.
  slabs.stored = parts.size() > 1 ? VoxelType::f32 : in.type();
  slabs.all = sum.all;
  slabs.part = sum.part;
  slabs.hist = sum.hist;
  slabs.part_hist = sum.part_hist;
  // The ROI by slices for a method pass of its own (wolf's largest std in the ROI); the air is not
  // cut to the ROI (OpenMask reads it once, beside the air).
  RoiSlabs roi_pass(opt.roi);
  if (opt.roi) slabs.roi = [&roi_pass](int64_t z0, int64_t n) { return roi_pass.get(z0, z0 + n); };
  OpenMask open(g, opt.roi);
  SlabAir a = method_slabs.air(base, slabs, [&open](int64_t z0, int64_t n, const uint8_t* air) { open.add(z0, n, air); });
  r.chosen = std::move(a.chosen);
  r.warnings = std::move(a.warnings);
  std::unique_ptr<SlabMaskWriter> mask = finish_pores(open, base, output, slab, a.no_part_setting, method, r);
  r.runtime_s = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  if (opt.before_commit) opt.before_commit(r);
  mask->commit();
  return r;
}

}  // namespace pb
