// The neural family's engines, each in a module opened on its first model (core/modules.hpp says
// where modules are looked for): libporebench_onnx.so (OpenCV dnn, ONNX;
// methods/engine_modules/onnx.cpp) and libporebench_torch.so (LibTorch, TorchScript;
// methods/engine_modules/torch.cpp), both behind the C entry points of engine_abi.h. Commands that
// load no model never load LibTorch's ~285 shared libraries, nor OpenCV dnn and protobuf (issue 16).
#include <array>
#include <stdexcept>

#include "core/error.hpp"
#include "core/modules.hpp"
#include "methods/engine_modules/engine_abi.h"
#include "methods/neural.hpp"

namespace pb {
namespace {

struct EngineApi {
  decltype(&pb_engine_name) name = nullptr;
  decltype(&pb_engine_error) error = nullptr;
  decltype(&pb_engine_load) load = nullptr;
  decltype(&pb_engine_run) run = nullptr;
  decltype(&pb_engine_output) output = nullptr;
  decltype(&pb_engine_free) free = nullptr;
};

template <class F>
void entry(F& f, void* h, const char* symbol, const std::string& file) {
  f = reinterpret_cast<F>(module_symbol(h, symbol, file));
}

EngineApi open_engine_module(const std::string& file, const std::string& build_dir, const std::string& what) {
  void* h = open_module(file, build_dir, what);
  decltype(&pb_engine_abi) abi = nullptr;
  entry(abi, h, "pb_engine_abi", file);
  if (abi() != PB_ENGINE_ABI)
    throw std::runtime_error("module " + file + " has entry points of version " + std::to_string(abi()) +
                             ", this library expects " + std::to_string(PB_ENGINE_ABI));
  EngineApi a;
  entry(a.name, h, "pb_engine_name", file);
  entry(a.error, h, "pb_engine_error", file);
  entry(a.load, h, "pb_engine_load", file);
  entry(a.run, h, "pb_engine_run", file);
  entry(a.output, h, "pb_engine_output", file);
  entry(a.free, h, "pb_engine_free", file);
  return a;
}

// Each module is opened once; a failed open throws (naming every path tried) and is tried again on
// the next model.
const EngineApi& torch_api() {
  static const EngineApi api = open_engine_module("libporebench_torch.so", PB_ENGINE_MODULE_DIR, "LibTorch (TorchScript models)");
  return api;
}
const EngineApi& onnx_api() {
  static const EngineApi api = open_engine_module("libporebench_onnx.so", PB_ENGINE_MODULE_DIR, "OpenCV dnn (ONNX models)");
  return api;
}

class ModuleEngine : public Engine {
 public:
  ModuleEngine(const EngineApi& api, const ModelCard& c, int threads) : api_(api), card_(c) {
    model_ = api_.load(c.model_path.c_str(), threads);
    if (!model_) throw InputError("model card " + c.card_path + ": field 'file' = '" + c.file + "': " + api_.error());
  }
  ~ModuleEngine() override { api_.free(model_); }
  ModuleEngine(const ModuleEngine&) = delete;
  ModuleEngine& operator=(const ModuleEngine&) = delete;

  std::vector<int64_t> run(const float* input, const std::vector<int64_t>& shape, std::vector<float>& out) override {
    const int rc = api_.run(model_, input, shape.data(), shape.size());
    const std::string model = "model card " + card_.card_path + ": model " + card_.model_path;
    if (rc == 1) throw InputError(model + " returns " + api_.error());
    if (rc != 0) {
      std::string s = "[";
      for (size_t i = 0; i < shape.size(); ++i) s += (i ? ", " : "") + std::to_string(shape[i]);
      throw InputError(model + " fails on an input of shape " + s + "]" + api_.error());
    }
    std::array<int64_t, 8> dims{};
    const float* data = nullptr;
    size_t count = 0;
    const size_t nd = api_.output(model_, dims.data(), dims.size(), &data, &count);
    if (nd > dims.size()) throw InputError(model + " returns a tensor of " + std::to_string(nd) + " dims");
    out.assign(data, data + count);
    return std::vector<int64_t>(dims.begin(), dims.begin() + nd);
  }

  std::string engine_name() const override { return api_.name(); }

 private:
  const EngineApi& api_;
  ModelCard card_;
  pb_engine_model* model_ = nullptr;
};

}  // namespace

std::unique_ptr<Engine> open_onnx_engine(const ModelCard& c, int threads) {
  return std::make_unique<ModuleEngine>(onnx_api(), c, threads);
}

std::unique_ptr<Engine> open_torch_engine(const ModelCard& c, int threads) {
  return std::make_unique<ModuleEngine>(torch_api(), c, threads);
}

}  // namespace pb
