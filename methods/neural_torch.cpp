// The LibTorch engine of the neural family: TorchScript models (every layer, 3D decoders
// included). The only file that sees LibTorch headers (13-17 s and ~720 MB to compile).
// Allocator: with glibc's default malloc LibTorch maps and unmaps its large tensors on every call
// (10k-60k page faults per forward, 2-5x slower; /work/shared/notes/inference-engines.md), so the
// engine keeps freed memory in the heap (M_MMAP_MAX 0, a high M_TRIM_THRESHOLD) for the process.
#include <malloc.h>

#include <ATen/Parallel.h>
#include <torch/script.h>
#include <torch/version.h>

#include "core/error.hpp"
#include "methods/neural.hpp"

namespace pb {
namespace {

class TorchEngine : public Engine {
 public:
  TorchEngine(const ModelCard& c, int threads) : card_(c) {
    mallopt(M_MMAP_MAX, 0);
    mallopt(M_TRIM_THRESHOLD, 1 << 30);
    if (threads > 0) at::set_num_threads(threads);
    try {
      module_ = torch::jit::load(c.model_path, torch::kCPU);
      module_.eval();
      module_ = torch::jit::optimize_for_inference(module_);
    } catch (const c10::Error& e) {
      throw InputError("model card " + c.card_path + ": field 'file' = '" + c.file + "': LibTorch cannot load " +
                       c.model_path + " as TorchScript: " + first_line(e.what_without_backtrace()));
    }
  }

  std::vector<int64_t> run(const float* input, const std::vector<int64_t>& shape, std::vector<float>& out) override {
    c10::InferenceMode guard;
    const at::Tensor x = torch::from_blob(const_cast<float*>(input), shape, torch::kFloat32);
    at::Tensor y;
    try {
      const c10::IValue r = module_.forward({x});
      if (!r.isTensor())
        throw InputError("model card " + card_.card_path + ": model " + card_.model_path +
                         " returns " + r.tagKind() + ", not one tensor");
      y = r.toTensor().to(torch::kFloat32).contiguous();
    } catch (const InputError&) {
      throw;
    } catch (const std::exception& e) {  // c10::Error, torch::jit::JITException
      std::string s = "[";
      for (size_t i = 0; i < shape.size(); ++i) s += (i ? ", " : "") + std::to_string(shape[i]);
      throw InputError("model card " + card_.card_path + ": model " + card_.model_path + " fails on an input of shape " +
                       s + "]: " + last_line(e.what()));
    }
    out.assign(y.data_ptr<float>(), y.data_ptr<float>() + y.numel());
    return std::vector<int64_t>(y.sizes().begin(), y.sizes().end());
  }

  std::string engine_name() const override { return "libtorch " TORCH_VERSION; }

 private:
  static std::string first_line(const std::string& s) { return s.substr(0, s.find('\n')); }
  // The interpreter's message ends with the error itself, after the TorchScript traceback.
  static std::string last_line(std::string s) {
    while (!s.empty() && (s.back() == '\n' || s.back() == ' ')) s.pop_back();
    const size_t nl = s.rfind('\n');
    return nl == std::string::npos ? s : s.substr(nl + 1);
  }
  ModelCard card_;
  torch::jit::Module module_;
};

}  // namespace

std::unique_ptr<Engine> open_torch_engine(const ModelCard& c, int threads) {
  return std::make_unique<TorchEngine>(c, threads);
}

}  // namespace pb
