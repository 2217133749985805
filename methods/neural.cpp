// The neural family: a model card (our JSON format) names a segmentation network and how to feed
// it; the network runs tile by tile with overlap, tiles blended with a cosine (Hann) window, the
// pore probability binarised at the card's pore_threshold (0.5: common practice, no source), then
// the shared pore extraction. U-Net: Ronneberger O., Fischer P., Brox T. (2015) U-Net:
// convolutional networks for biomedical image segmentation. MICCAI, LNCS 9351:234-241.
// Overlap-tile inference with smooth blending: common practice, no source. Conventions: the
// network outputs pore (not air) probability; tiles are in tensor order [z,] y, x; a "stack"
// model sees `slices` adjacent z-slices centred on its slice as channels; past the volume's
// border the input is mirrored.
#include "methods/neural.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <numeric>
#include <sstream>

#include "core/error.hpp"
#include "core/parallel.hpp"
#include "core/text_file.hpp"
#include "methods/pores.hpp"
#include "methods/registry.hpp"

#ifndef PB_MODELS_DIR
#define PB_MODELS_DIR "models"
#endif

namespace pb {

namespace fs = std::filesystem;
using Json = nlohmann::json;

// ---- the card ----------------------------------------------------------------------------------

namespace {

struct CardReader {
  const std::string& path;
  [[noreturn]] void fail(const std::string& field, const std::string& what) const {
    throw InputError("model card " + path + ": field '" + field + "' " + what);
  }
  static std::string show(const Json& v) { return v.dump(); }
  const Json& at(const Json& obj, const std::string& key, const std::string& field) const {
    if (!obj.is_object()) fail(field.substr(0, field.rfind('.')), "must be an object");
    auto it = obj.find(key);
    if (it == obj.end()) fail(field, "is missing");
    return *it;
  }
  std::string str(const Json& obj, const std::string& key, const std::string& field, bool non_empty = true) const {
    const Json& v = at(obj, key, field);
    if (!v.is_string()) fail(field, "= " + show(v) + " must be a string");
    if (non_empty && v.get<std::string>().empty()) fail(field, "must not be empty");
    return v.get<std::string>();
  }
  std::string choice(const Json& obj, const std::string& key, const std::string& field,
                     const std::vector<std::string>& allowed) const {
    const std::string s = str(obj, key, field);
    if (std::find(allowed.begin(), allowed.end(), s) == allowed.end()) {
      std::string list;
      for (const auto& a : allowed) list += (list.empty() ? "" : ", ") + a;
      fail(field, "= \"" + s + "\" is not one of " + list);
    }
    return s;
  }
  double num(const Json& v, const std::string& field, double lo, double hi) const {
    if (!v.is_number()) fail(field, "= " + show(v) + " must be a number");
    const double d = v.get<double>();
    if (!std::isfinite(d) || d < lo || d > hi) {
      std::ostringstream s;
      s << "= " << show(v) << " is out of range [" << lo << ", " << hi << "]";
      fail(field, s.str());
    }
    return d;
  }
  int64_t integer(const Json& v, const std::string& field, int64_t lo, int64_t hi) const {
    if (!v.is_number_integer()) fail(field, "= " + show(v) + " must be a whole number");
    const int64_t i = v.get<int64_t>();
    if (i < lo || i > hi) fail(field, "= " + show(v) + " is out of range [" + std::to_string(lo) + ", " + std::to_string(hi) + "]");
    return i;
  }
  void keys(const Json& obj, const std::string& field, const std::vector<std::string>& allowed) const {
    if (!obj.is_object()) fail(field, "= " + show(obj) + " must be an object");
    for (auto it = obj.begin(); it != obj.end(); ++it)
      if (std::find(allowed.begin(), allowed.end(), it.key()) == allowed.end()) {
        std::string list;
        for (const auto& a : allowed) list += (list.empty() ? "" : ", ") + a;
        fail((field.empty() ? "" : field + ".") + it.key(), "is not a card field (known here: " + list + ")");
      }
  }
};

}  // namespace

ModelCard read_model_card(const std::string& path) {
  return parse_model_card(read_text_file(path, "model card"), path);
}

ModelCard parse_model_card(const std::string& text, const std::string& path) {
  Json j;
  try {
    j = Json::parse(text);
  } catch (const Json::exception& e) {  // parse_error, and out_of_range for a number past double (1E400)
    throw InputError("model card " + path + ": not valid JSON: " + e.what());
  }
  const CardReader r{path};
  if (!j.is_object()) throw InputError("model card " + path + ": the card must be a JSON object");
  r.keys(j, "", {"name", "version", "format", "file", "input", "output", "training", "intended_use", "licence"});
  ModelCard c;
  c.card_path = path;
  c.name = r.str(j, "name", "name");
  for (char ch : c.name)
    if (!(std::isalnum(static_cast<unsigned char>(ch)) || ch == '-' || ch == '_' || ch == '.'))
      r.fail("name", "= \"" + c.name + "\" may hold only letters, digits, '-', '_' and '.'");
  c.version = r.str(j, "version", "version");
  c.format = r.choice(j, "format", "format", {"onnx", "torchscript"});
  c.file = r.str(j, "file", "file");
  const fs::path model = fs::path(path).parent_path() / c.file;
  c.model_path = model.string();
  std::error_code ec;
  if (!fs::is_regular_file(model, ec))
    r.fail("file", "= \"" + c.file + "\": the model file " + c.model_path + " does not exist");

  const Json& in = r.at(j, "input", "input");
  r.keys(in, "input", {"kind", "slices", "tile", "overlap", "normalise"});
  c.kind = r.choice(in, "kind", "input.kind", {"slice", "stack", "patch"});
  c.slices = in.contains("slices") ? int(r.integer(in["slices"], "input.slices", 1, 15)) : 1;
  if (c.kind == "stack" && c.slices % 2 == 0)
    r.fail("input.slices", "= " + std::to_string(c.slices) + " must be odd for a stack (slices centred on the slice)");
  if (c.kind != "stack" && c.slices != 1)
    r.fail("input.slices", "= " + std::to_string(c.slices) + " must be 1 for input.kind \"" + c.kind + "\"");
  const Json& tile = r.at(in, "tile", "input.tile");
  const size_t rank = c.kind == "patch" ? 3 : 2;
  if (!tile.is_array() || tile.size() != rank)
    r.fail("input.tile", "= " + tile.dump() + " must list " + std::to_string(rank) + " sizes for input.kind \"" + c.kind + "\"");
  for (size_t i = 0; i < rank; ++i)
    c.tile.push_back(r.integer(tile[i], "input.tile[" + std::to_string(i) + "]", 8, rank == 3 ? 256 : 2048));
  c.overlap = in.contains("overlap") ? r.num(in["overlap"], "input.overlap", 0, 0.75) : 0.25;
  const Json& norm = r.at(in, "normalise", "input.normalise");
  c.norm_mode = r.choice(norm, "mode", "input.normalise.mode", {"window", "percentile", "zscore"});
  if (c.norm_mode == "zscore") {
    r.keys(norm, "input.normalise", {"mode"});
  } else {
    r.keys(norm, "input.normalise", {"mode", "low", "high"});
    const double lim = c.norm_mode == "percentile" ? 100 : 3.4e38;
    c.norm_low = r.num(r.at(norm, "low", "input.normalise.low"), "input.normalise.low", c.norm_mode == "percentile" ? 0 : -lim, lim);
    c.norm_high = r.num(r.at(norm, "high", "input.normalise.high"), "input.normalise.high", c.norm_mode == "percentile" ? 0 : -lim, lim);
    if (!(c.norm_low < c.norm_high))
      r.fail("input.normalise.high", "= " + norm["high"].dump() + " must exceed input.normalise.low = " + norm["low"].dump());
  }
  const Json& out = r.at(j, "output", "output");
  r.keys(out, "output", {"kind", "channel", "pore_threshold"});
  c.output_kind = r.choice(out, "kind", "output.kind", {"probability", "logit"});
  c.channel = out.contains("channel") ? int(r.integer(out["channel"], "output.channel", 0, 63)) : 0;
  c.pore_threshold = out.contains("pore_threshold") ? r.num(out["pore_threshold"], "output.pore_threshold", 1e-6, 1 - 1e-6) : 0.5;
  c.training = r.at(j, "training", "training");
  if (!c.training.is_object()) r.fail("training", "= " + c.training.dump() + " must be an object");
  r.str(c.training, "data", "training.data");
  c.intended_use = r.str(j, "intended_use", "intended_use");
  c.licence = r.str(j, "licence", "licence");
  return c;
}

// ---- the model ---------------------------------------------------------------------------------

namespace {
std::string shape_text(const std::vector<int64_t>& s) {
  std::string t = "[";
  for (size_t i = 0; i < s.size(); ++i) t += (i ? ", " : "") + std::to_string(s[i]);
  return t + "]";
}
}  // namespace

int64_t Model::tile_voxels() const {
  int64_t n = 1;
  for (int64_t t : card_.tile) n *= t;
  return n;
}

Model::Model(ModelCard card, int threads) : card_(std::move(card)) {
  engine_ = card_.format == "onnx" ? open_onnx_engine(card_, threads) : open_torch_engine(card_, threads);
  engine_name_ = engine_->engine_name();
  // Probe: one zero tile at the card's shape; the output must be [1, > channel, tile...].
  std::vector<int64_t> shape = {1, card_.channels()};
  shape.insert(shape.end(), card_.tile.begin(), card_.tile.end());
  const std::vector<float> zeros(size_t(card_.channels() * tile_voxels()), 0.0f);
  std::vector<int64_t> got;
  try {
    got = engine_->run(zeros.data(), shape, out_);
  } catch (const InputError& e) {
    throw InputError(std::string(e.what()) + " (card fields 'input.kind', 'input.slices' and 'input.tile' give this shape)");
  }
  std::vector<int64_t> want = {1, -1};
  want.insert(want.end(), card_.tile.begin(), card_.tile.end());
  bool ok = got.size() == want.size() && got[0] == 1;
  for (size_t i = 2; ok && i < got.size(); ++i) ok = got[i] == want[i];
  if (!ok)
    throw InputError("model card " + card_.card_path + ": field 'input.tile' = " + shape_text(card_.tile) +
                     " does not match model " + card_.model_path + ": for an input of shape " + shape_text(shape) +
                     " it returns " + shape_text(got) + " (the output must have the input's spatial size)");
  if (got[1] <= card_.channel)
    throw InputError("model card " + card_.card_path + ": field 'output.channel' = " + std::to_string(card_.channel) +
                     " but model " + card_.model_path + " has " + std::to_string(got[1]) + " output channel(s)");
}

int64_t Model::forward(const float* input, int64_t batch) {
  std::vector<int64_t> shape = {batch, card_.channels()};
  shape.insert(shape.end(), card_.tile.begin(), card_.tile.end());
  engine_->run(input, shape, out_);
  return int64_t(out_.size());
}

void Model::predict(const float* input, int64_t batch, float* prob) {
  std::vector<int64_t> shape = {batch, card_.channels()};
  shape.insert(shape.end(), card_.tile.begin(), card_.tile.end());
  const std::vector<int64_t> got = engine_->run(input, shape, out_);
  const int64_t tv = tile_voxels();
  if (got.size() != shape.size() || got[0] != batch || int64_t(out_.size()) != batch * got[1] * tv)
    throw InputError("model card " + card_.card_path + ": model " + card_.model_path + " returns shape " +
                     shape_text(got) + " for an input of shape " + shape_text(shape));
  const int64_t k = got[1];
  const bool logit = card_.output_kind == "logit";
  for (int64_t b = 0; b < batch; ++b) {
    const float* src = out_.data() + (b * k + card_.channel) * tv;
    float* dst = prob + b * tv;
    for (int64_t i = 0; i < tv; ++i) {
      const float y = src[i];
      if (!std::isfinite(y))
        throw InputError("model card " + card_.card_path + ": model " + card_.model_path + " output (field 'output.channel' = " +
                         std::to_string(card_.channel) + ") holds a non-finite value (" + std::to_string(y) + ")");
      dst[i] = logit ? 1.0f / (1.0f + std::exp(-y)) : y;
    }
  }
}

// ---- tiling and blending -----------------------------------------------------------------------

std::vector<int64_t> tile_origins(int64_t n, int64_t tile, double overlap) {
  const int64_t align = std::gcd(tile, int64_t(8));
  int64_t stride = tile - int64_t(std::lround(overlap * double(tile)));
  stride = std::max(align, stride / align * align);
  std::vector<int64_t> o;
  for (int64_t p = 0;; p += stride) {
    o.push_back(p);
    if (p + tile >= n) break;
  }
  return o;
}

Normaliser make_normaliser(const ModelCard& c, const VolumeF& v, const Mask* roi) {
  Normaliser nz;
  auto inside = [&](int64_t i) { return (!roi || (*roi)[i]) && std::isfinite(v[i]); };
  if (c.norm_mode == "window") {
    nz.offset = c.norm_low;
    nz.scale = 1.0 / (c.norm_high - c.norm_low);
  } else if (c.norm_mode == "zscore") {
    double s = 0, s2 = 0;
    int64_t n = 0;
    for (int64_t i = 0; i < v.size(); ++i)
      if (inside(i)) s += v[i], ++n;
    const double mean = n ? s / double(n) : 0;
    for (int64_t i = 0; i < v.size(); ++i)
      if (inside(i)) s2 += (v[i] - mean) * (v[i] - mean);
    const double sd = n > 1 ? std::sqrt(s2 / double(n - 1)) : 0;
    nz.offset = mean;
    nz.scale = sd > 0 ? 1.0 / sd : 1.0;
  } else {  // percentile: linear interpolation between order statistics (numpy's default)
    std::vector<float> vals;
    for (int64_t i = 0; i < v.size(); ++i)
      if (inside(i)) vals.push_back(v[i]);
    if (vals.empty()) return nz;
    auto pct = [&](double q) {
      const double pos = q / 100.0 * double(vals.size() - 1);
      const size_t k = size_t(std::floor(pos));
      std::nth_element(vals.begin(), vals.begin() + long(k), vals.end());
      const double a = vals[k];
      if (k + 1 >= vals.size()) return a;
      const double b = *std::min_element(vals.begin() + long(k) + 1, vals.end());
      return a + (pos - double(k)) * (b - a);
    };
    const double lo = pct(c.norm_low), hi = pct(c.norm_high);
    nz.offset = lo;
    nz.scale = hi > lo ? 1.0 / (hi - lo) : 1.0;
  }
  return nz;
}

int64_t mirror_index(int64_t i, int64_t n) {
  if (n == 1) return 0;
  const int64_t period = 2 * (n - 1);
  i %= period;
  if (i < 0) i += period;
  return i < n ? i : period - i;
}

namespace {

// Hann window sin^2(pi (i + 0.5) / T): never zero inside the tile, small at its edges.
std::vector<double> window(int64_t t) {
  std::vector<double> w(static_cast<size_t>(t));
  for (int64_t i = 0; i < t; ++i) {
    const double s = std::sin(M_PI * (double(i) + 0.5) / double(t));
    w[size_t(i)] = s * s;
  }
  return w;
}

// Sum of the windows of all tiles over each position of an axis.
std::vector<double> window_sum(int64_t n, int64_t t, const std::vector<int64_t>& origins, const std::vector<double>& w) {
  std::vector<double> s(size_t(n), 0.0);
  for (int64_t o : origins)
    for (int64_t i = 0; i < t && o + i < n; ++i) s[size_t(o + i)] += w[size_t(i)];
  return s;
}

}  // namespace

VolumeF predict_volume(Model& m, const VolumeF& v, const Mask* roi, const NeuralOptions& o) {
  const ModelCard& c = m.card();
  const Normaliser nz = make_normaliser(c, v, roi);
  const int64_t nx = v.nx(), ny = v.ny(), nz_ = v.nz();
  const bool p3 = c.is_3d();
  const int64_t tz = p3 ? c.tile[0] : 1, ty = c.tile[p3 ? 1 : 0], tx = c.tile[p3 ? 2 : 1];
  const int64_t ch = c.channels();
  const auto ox = tile_origins(nx, tx, o.overlap), oy = tile_origins(ny, ty, o.overlap);
  std::vector<int64_t> oz;
  if (p3) oz = tile_origins(nz_, tz, o.overlap);
  else for (int64_t z = 0; z < nz_; ++z) oz.push_back(z);
  const auto wx = window(tx), wy = window(ty), wz = p3 ? window(tz) : std::vector<double>{1.0};
  const auto sx = window_sum(nx, tx, ox, wx), sy = window_sum(ny, ty, oy, wy), sz = window_sum(nz_, tz, oz, wz);

  struct Tile { int64_t z, y, x; };
  std::vector<Tile> tiles;
  for (int64_t z : oz)
    for (int64_t y : oy)
      for (int64_t x : ox) tiles.push_back({z, y, x});

  VolumeF acc(v.geometry(), Zeroed{});
  const int64_t tv = tz * ty * tx;
  const int64_t batch = std::max(1, o.batch);
  std::vector<float> in(size_t(batch * ch * tv)), prob(size_t(batch * tv));
  const float off = float(nz.offset), scale = float(nz.scale);
  for (size_t t0 = 0; t0 < tiles.size(); t0 += size_t(batch)) {
    const int64_t nb = std::min<int64_t>(batch, int64_t(tiles.size() - t0));
    // Gather the tiles' input rows (mirrored past the border, normalised; NaN -> 0).
    const int64_t rows = nb * ch * tz * ty;
#pragma omp parallel for schedule(static)
    for (int64_t r = 0; r < rows; ++r) {
      const int64_t j = r % ty, k = (r / ty) % tz, q = (r / (ty * tz)) % ch, b = r / (ty * tz * ch);
      const Tile& t = tiles[t0 + size_t(b)];
      const int64_t z = p3 ? mirror_index(t.z + k, nz_) : mirror_index(t.z + q - ch / 2, nz_);
      const float* src = v.data() + (z * ny + mirror_index(t.y + j, ny)) * nx;
      float* dst = in.data() + r * tx;
      for (int64_t i = 0; i < tx; ++i) {
        const float g = src[t.x + i < nx ? t.x + i : mirror_index(t.x + i, nx)];
        dst[i] = std::isfinite(g) ? (g - off) * scale : 0.0f;
      }
    }
    m.predict(in.data(), nb, prob.data());
    // Blend: one parallel pass over the volume rows the batch covers; each row adds its tiles in
    // batch order, so each voxel sums its tiles in the same order for any thread count (and one
    // thread owns a row: overlapping tiles never race).
    int64_t zlo = nz_, zhi = 0;
    for (int64_t b = 0; b < nb; ++b) {
      const Tile& t = tiles[t0 + size_t(b)];
      zlo = std::min(zlo, t.z);
      zhi = std::max(zhi, std::min(t.z + tz, nz_));
    }
    // Dynamic: a batch's tiles cover its rows unevenly (a slice's first rows hold most tiles).
#pragma omp parallel for schedule(dynamic, 8)
    for (int64_t r = 0; r < (zhi - zlo) * ny; ++r) {
      const int64_t z = zlo + r / ny, y = r % ny;
      for (int64_t b = 0; b < nb; ++b) {
        const Tile& t = tiles[t0 + size_t(b)];
        const int64_t k = z - t.z, j = y - t.y;
        if (k < 0 || k >= tz || j < 0 || j >= ty) continue;
        const int64_t ix = std::min(tx, nx - t.x);
        const double wkj = wz[size_t(k)] * wy[size_t(j)];
        const float* p = prob.data() + b * tv + (k * ty + j) * tx;
        float* a = acc.data() + (z * ny + y) * nx + t.x;
        for (int64_t i = 0; i < ix; ++i) a[i] += float(wkj * wx[size_t(i)]) * p[i];
      }
    }
  }
#pragma omp parallel for schedule(static)
  for (int64_t z = 0; z < nz_; ++z)
    for (int64_t y = 0; y < ny; ++y) {
      float* a = acc.data() + (z * ny + y) * nx;
      const double szy = sz[size_t(z)] * sy[size_t(y)];
      for (int64_t x = 0; x < nx; ++x) a[x] = float(double(a[x]) / (szy * sx[size_t(x)]));
    }
  return acc;
}

// ---- the family in the registry ----------------------------------------------------------------

std::string models_folder() {
  if (const char* e = std::getenv("POREBENCH_MODELS"); e && *e) return e;
  return PB_MODELS_DIR;
}

namespace {

std::vector<ParamSpec> run_params(const ModelCard* c) {
  auto text = [](double d) {
    std::ostringstream s;
    s << d;
    return s.str();
  };
  return {{"pore_threshold", ParamType::Float, c ? text(c->pore_threshold) : "0", 0, 0.999999, {}, "probability",
           c ? "pore probability at or above which a voxel is a pore (card: " + text(c->pore_threshold) + ")"
             : "pore probability at or above which a voxel is a pore; 0 = the card's output.pore_threshold"},
          {"overlap", ParamType::Float, c ? text(c->overlap) : "-1", -1, 0.75, {}, "fraction",
           c ? "fraction of a tile shared with its neighbour" : "fraction of a tile shared with its neighbour; -1 = the card's input.overlap"},
          {"batch", ParamType::Int, "4", 1, 256, {}, "tiles", "tiles per forward call (results do not depend on it up to float rounding)"}};
}

MethodOutput run_card(const ModelCard& card, const MethodInput& in, const ParamValues& p) {
  Model model(card, thread_count());
  NeuralOptions o;
  o.overlap = p.num("overlap") >= 0 ? p.num("overlap") : card.overlap;
  o.batch = int(p.integer("batch"));
  const double thr = p.num("pore_threshold") > 0 ? p.num("pore_threshold") : card.pore_threshold;
  MethodOutput out;
  out.probability = predict_volume(model, in.volume, in.roi, o);
  out.pores = Mask(in.volume.geometry(), Zeroed{});
  const float t = float(thr);
  const float* pr = out.probability.data();
  uint8_t* mk = out.pores.data();
  const uint8_t* roi = in.roi ? in.roi->data() : nullptr;
#pragma omp parallel for schedule(static)
  for (int64_t i = 0; i < out.pores.size(); ++i) mk[i] = pr[i] >= t && (!roi || roi[i]);
  out.part_voxels = air_to_pores(out.pores, in.roi);
  out.chosen = {{"pore_threshold", thr}, {"overlap", o.overlap}};
  return out;
}

MethodInfo neural_info() {
  MethodInfo m;
  m.name = "neural";
  m.family = "neural";
  m.doc = "a segmentation network from its model card (ONNX via OpenCV dnn, TorchScript via LibTorch), tiled with cosine blending";
  m.citation = "Ronneberger O., Fischer P., Brox T. (2015) U-Net: convolutional networks for biomedical image segmentation. MICCAI, LNCS 9351:234-241";
  m.params = {{"model", ParamType::Text, "", 0, 0, {}, "path", "the model card (JSON) beside the model file"}};
  for (auto& s : run_params(nullptr)) m.params.push_back(s);
  m.run = [](const MethodInput& in, const ParamValues& p) { return run_card(read_model_card(p.choice("model")), in, p); };
  return m;
}

// Cards in the models folder (models/*/card.json) register by their name.
bool register_model_cards() {
  std::error_code ec;
  const fs::path dir = models_folder();
  if (!fs::is_directory(dir, ec)) return true;
  std::vector<fs::path> cards;
  for (const auto& e : fs::directory_iterator(dir, ec))
    if (e.is_directory(ec) && fs::is_regular_file(e.path() / "card.json", ec)) cards.push_back(e.path() / "card.json");
  std::sort(cards.begin(), cards.end());
  for (const auto& path : cards) {
    try {
      const ModelCard c = read_model_card(path.string());
      if (Registry::instance().find(c.name)) {
        std::fprintf(stderr, "porebench: warning: model card %s: name '%s' is taken; not registered\n", path.c_str(), c.name.c_str());
        continue;
      }
      MethodInfo m;
      m.name = c.name;
      m.family = "neural";
      m.doc = "model " + c.name + " " + c.version + " (" + c.kind + ", " + c.format + "): " + c.intended_use;
      m.citation = neural_info().citation + "; model card " + path.string();
      m.params = run_params(&c);
      const std::string card_path = path.string();
      m.run = [card_path](const MethodInput& in, const ParamValues& p) { return run_card(read_model_card(card_path), in, p); };
      Registry::instance().add(std::move(m));
    } catch (const InputError& e) {
      std::fprintf(stderr, "porebench: warning: %s; not registered\n", e.what());
    }
  }
  return true;
}

}  // namespace

PB_REGISTER_METHOD(neural_info());
static const bool pb_model_cards_registered = register_model_cards();

}  // namespace pb
