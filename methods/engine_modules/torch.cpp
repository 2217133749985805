// libporebench_torch.so: the LibTorch engine of the neural family (TorchScript models, every layer,
// 3D decoders included) behind the C entry points of engine_abi.h. The only translation unit that
// sees LibTorch headers (13-17 s and ~720 MB to compile); opened by methods/neural_engines.cpp when
// the first TorchScript model is loaded.
// Allocator: with glibc's default malloc LibTorch maps and unmaps its large tensors on every call
// (10k-60k page faults per forward, 2-5x slower; models/ENGINES.md), so the
// engine keeps freed memory in the heap (M_MMAP_MAX 0, a high M_TRIM_THRESHOLD) for the process.
#include <malloc.h>

#include <ATen/Parallel.h>
#include <torch/script.h>
#include <torch/version.h>

#include <exception>
#include <string>

#include "methods/engine_modules/engine_abi.h"

struct pb_engine_model {
  torch::jit::Module module;
  at::Tensor output;
};

namespace {

thread_local std::string g_error;

std::string first_line(const std::string& s) { return s.substr(0, s.find('\n')); }
// The interpreter's message ends with the error itself, after the TorchScript traceback.
std::string last_line(std::string s) {
  while (!s.empty() && (s.back() == '\n' || s.back() == ' ')) s.pop_back();
  const size_t nl = s.rfind('\n');
  return nl == std::string::npos ? s : s.substr(nl + 1);
}

}  // namespace

#define PB_EXPORT extern "C" __attribute__((visibility("default")))

PB_EXPORT int pb_engine_abi(void) { return PB_ENGINE_ABI; }
PB_EXPORT const char* pb_engine_name(void) { return "libtorch " TORCH_VERSION; }
PB_EXPORT const char* pb_engine_error(void) { return g_error.c_str(); }

PB_EXPORT pb_engine_model* pb_engine_load(const char* path, int threads) {
  std::string why;
  try {
    mallopt(M_MMAP_MAX, 0);
    mallopt(M_TRIM_THRESHOLD, 1 << 30);
    if (threads > 0) at::set_num_threads(threads);
    auto m = std::make_unique<pb_engine_model>();
    m->module = torch::jit::load(path, torch::kCPU);
    m->module.eval();
    m->module = torch::jit::optimize_for_inference(m->module);
    return m.release();
  } catch (const c10::Error& e) {
    why = first_line(e.what_without_backtrace());
  } catch (const std::exception& e) {
    why = first_line(e.what());
  } catch (...) {
    why = "unknown error";
  }
  g_error = std::string("LibTorch cannot load ") + path + " as TorchScript: " + why;
  return nullptr;
}

PB_EXPORT int pb_engine_run(pb_engine_model* m, const float* input, const int64_t* shape, size_t ndim) {
  try {
    c10::InferenceMode guard;
    const at::Tensor x = torch::from_blob(const_cast<float*>(input), c10::IntArrayRef(shape, ndim), torch::kFloat32);
    const c10::IValue r = m->module.forward({x});
    if (!r.isTensor()) {
      g_error = r.tagKind() + ", not one tensor";
      return 1;
    }
    m->output = r.toTensor().to(torch::kFloat32).contiguous();
    return 0;
  } catch (const std::exception& e) {  // c10::Error, torch::jit::JITException
    g_error = ": " + last_line(e.what());
  } catch (...) {
    g_error = ": unknown error";
  }
  return 2;
}

PB_EXPORT size_t pb_engine_output(const pb_engine_model* m, int64_t* shape, size_t max_ndim, const float** data,
                                  size_t* count) {
  const auto sizes = m->output.sizes();
  for (size_t i = 0; i < sizes.size() && i < max_ndim; ++i) shape[i] = sizes[i];
  *data = m->output.data_ptr<float>();
  *count = size_t(m->output.numel());
  return sizes.size();
}

PB_EXPORT void pb_engine_free(pb_engine_model* m) { delete m; }
