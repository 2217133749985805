#pragma once
// The neural family: segmentation models (ONNX through OpenCV dnn, TorchScript through LibTorch)
// described by a model card (our JSON format, beside the model file), run tile by tile with
// overlap and cosine blending into a pore-probability map, binarised at the card's
// pore_threshold, then the shared pore extraction (methods/pores.hpp).
// Each engine lives in a module opened with its first model (methods/neural_engines.cpp):
// engine_modules/onnx.cpp (OpenCV dnn) and engine_modules/torch.cpp (LibTorch) are the only files
// that see their headers; this header and neural.cpp see neither.
#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "core/json.hpp"

#include "core/volume.hpp"

namespace pb {

// A model card. Tile sizes are in tensor order: [rows, columns] = [y, x] for 2D, [z, y, x] for 3D.
struct ModelCard {
  std::string card_path;   // the card file (every error names it)
  std::string name, version;
  std::string format;      // "onnx" | "torchscript"
  std::string file;        // as written in the card
  std::string model_path;  // resolved against the card's folder
  std::string kind;        // "slice" (2D) | "stack" (2.5D, `slices` z-slices as channels) | "patch" (3D)
  int slices = 1;
  std::vector<int64_t> tile;
  double overlap = 0.25;
  std::string norm_mode;   // "window" | "percentile" | "zscore"
  double norm_low = 0, norm_high = 1;
  std::string output_kind; // "probability" | "logit"
  int channel = 0;
  double pore_threshold = 0.5;  // common practice, no source
  nlohmann::json training;
  std::string intended_use, licence;

  int channels() const { return kind == "stack" ? slices : 1; }
  bool is_3d() const { return kind == "patch"; }
};

// Reads and validates a card (fields, types, ranges, the model file's presence). Throws
// InputError naming the card, the field and the value.
ModelCard read_model_card(const std::string& card_path);
// The same on the card's text (card_path names it in errors; the model file is looked for beside it).
ModelCard parse_model_card(const std::string& text, const std::string& card_path);

// One loaded model. run() takes a batch of tiles [batch, channels, (z,) y, x] and returns the
// model's full output, with its shape.
class Engine {
 public:
  virtual ~Engine() = default;
  virtual std::vector<int64_t> run(const float* input, const std::vector<int64_t>& shape, std::vector<float>& out) = 0;
  virtual std::string engine_name() const = 0;  // "opencv-dnn 4.6.0", "libtorch 1.13.1"
};

// Engine factories, one per translation unit. Errors (missing/corrupt file, unsupported layer)
// are InputErrors naming the card and the model file.
std::unique_ptr<Engine> open_onnx_engine(const ModelCard& c, int threads);   // neural_engines.cpp
std::unique_ptr<Engine> open_torch_engine(const ModelCard& c, int threads);  // neural_engines.cpp

// A loaded, validated model: the engine is probed with one zero tile at the card's shape, and
// the output shape is checked against the card ([1, >channel, tile...]).
class Model {
 public:
  Model(ModelCard card, int threads);
  const ModelCard& card() const { return card_; }
  const std::string& engine_name() const { return engine_name_; }
  // Probability of the card's channel for `batch` tiles (logits go through the sigmoid); throws
  // InputError on NaN/Inf output.
  void predict(const float* input, int64_t batch, float* prob);
  int64_t tile_voxels() const;  // per channel
  // The bare engine call (no channel pick, check or sigmoid), for benchmarks: returns the output size.
  int64_t forward(const float* input, int64_t batch);

 private:
  ModelCard card_;
  std::unique_ptr<Engine> engine_;
  std::string engine_name_;
  std::vector<float> out_;
};

struct NeuralOptions {
  double overlap = 0.25;  // fraction of the tile shared with the neighbour
  int batch = 4;          // tiles per forward call
};

// Tile origins along one axis of length n: multiples of the stride (the stride is rounded down to
// a multiple of gcd(tile, 8) so that pooling grids of up to three levels line up with the whole
// image), the last tile reaching n or beyond (the input is mirrored past the border).
std::vector<int64_t> tile_origins(int64_t n, int64_t tile, double overlap);

// Index i of an axis of length n mirrored past the borders without repeating the edge voxel
// (numpy.pad mode 'reflect': -1 -> 1, n -> n - 2): how tiles read beyond the volume, in inference
// and in the training patches of export-patches alike.
int64_t mirror_index(int64_t i, int64_t n);

// Grey values -> network input, following the card's normalise block (percentile and zscore
// statistics over the voxels inside the ROI, or all voxels).
struct Normaliser {
  double offset = 0, scale = 1;  // input = (v - offset) * scale; NaN -> 0
};
Normaliser make_normaliser(const ModelCard& c, const VolumeF& v, const Mask* roi);

// The blended pore-probability map of a volume: tiles in a fixed order, fixed batches, fixed
// accumulation order, so the map does not depend on the number of threads.
VolumeF predict_volume(Model& m, const VolumeF& v, const Mask* roi, const NeuralOptions& o);

// Folder searched for shipped model cards (models/*/card.json): $POREBENCH_MODELS, else the
// source tree's models/ folder.
std::string models_folder();

}  // namespace pb
