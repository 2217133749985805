// The LibTorch engine of the neural family: TorchScript models, run by the module
// libporebench_torch.so (methods/torch_module/module.cpp, the only file that sees LibTorch), which
// this file opens on the first TorchScript model (core/modules.hpp says where it is looked for).
// Commands that load no TorchScript model never load LibTorch's ~285 shared libraries (issue 16).
#include <array>

#include "core/error.hpp"
#include "core/modules.hpp"
#include "methods/neural.hpp"
#include "methods/torch_module/torch_abi.h"

namespace pb {
namespace {

struct TorchApi {
  decltype(&pb_torch_version) version = nullptr;
  decltype(&pb_torch_error) error = nullptr;
  decltype(&pb_torch_load) load = nullptr;
  decltype(&pb_torch_run) run = nullptr;
  decltype(&pb_torch_output) output = nullptr;
  decltype(&pb_torch_free) free = nullptr;
};

template <class F>
void entry(F& f, void* h, const char* symbol, const std::string& file) {
  f = reinterpret_cast<F>(module_symbol(h, symbol, file));
}

// Opened once; a failed open throws (naming every path tried) and is tried again on the next model.
const TorchApi& torch_api() {
  static const TorchApi api = [] {
    const std::string file = "libporebench_torch.so";
    void* h = open_module(file, PB_TORCH_MODULE_DIR, "LibTorch (TorchScript models)");
    decltype(&pb_torch_abi) abi = nullptr;
    entry(abi, h, "pb_torch_abi", file);
    if (abi() != PB_TORCH_ABI)
      throw std::runtime_error("module " + file + " has entry points of version " + std::to_string(abi()) +
                               ", this library expects " + std::to_string(PB_TORCH_ABI));
    TorchApi a;
    entry(a.version, h, "pb_torch_version", file);
    entry(a.error, h, "pb_torch_error", file);
    entry(a.load, h, "pb_torch_load", file);
    entry(a.run, h, "pb_torch_run", file);
    entry(a.output, h, "pb_torch_output", file);
    entry(a.free, h, "pb_torch_free", file);
    return a;
  }();
  return api;
}

class TorchEngine : public Engine {
 public:
  TorchEngine(const ModelCard& c, int threads) : api_(torch_api()), card_(c) {
    model_ = api_.load(c.model_path.c_str(), threads);
    if (!model_)
      throw InputError("model card " + c.card_path + ": field 'file' = '" + c.file + "': LibTorch cannot load " +
                       c.model_path + " as TorchScript: " + api_.error());
  }
  ~TorchEngine() override { api_.free(model_); }
  TorchEngine(const TorchEngine&) = delete;
  TorchEngine& operator=(const TorchEngine&) = delete;

  std::vector<int64_t> run(const float* input, const std::vector<int64_t>& shape, std::vector<float>& out) override {
    const int rc = api_.run(model_, input, shape.data(), shape.size());
    if (rc == 1)
      throw InputError("model card " + card_.card_path + ": model " + card_.model_path + " returns " + api_.error() +
                       ", not one tensor");
    if (rc != 0) {
      std::string s = "[";
      for (size_t i = 0; i < shape.size(); ++i) s += (i ? ", " : "") + std::to_string(shape[i]);
      throw InputError("model card " + card_.card_path + ": model " + card_.model_path + " fails on an input of shape " +
                       s + "]: " + api_.error());
    }
    std::array<int64_t, 8> dims{};
    const float* data = nullptr;
    size_t count = 0;
    const size_t nd = api_.output(model_, dims.data(), dims.size(), &data, &count);
    if (nd > dims.size())
      throw InputError("model card " + card_.card_path + ": model " + card_.model_path + " returns a tensor of " +
                       std::to_string(nd) + " dims");
    out.assign(data, data + count);
    return std::vector<int64_t>(dims.begin(), dims.begin() + nd);
  }

  std::string engine_name() const override { return std::string("libtorch ") + api_.version(); }

 private:
  const TorchApi& api_;
  ModelCard card_;
  pb_torch_model* model_ = nullptr;
};

}  // namespace

std::unique_ptr<Engine> open_torch_engine(const ModelCard& c, int threads) {
  return std::make_unique<TorchEngine>(c, threads);
}

}  // namespace pb
