// libporebench_onnx.so: the OpenCV dnn engine of the neural family (ONNX models: 2D, 2.5D, and 3D
// ones OpenCV runs: Conv3d and MaxPool3d, not ConvTranspose3d in 4.6) behind the C entry points of
// engine_abi.h. The only file that sees opencv2/dnn; opened by methods/neural_engines.cpp when the
// first ONNX model is loaded (OpenCV dnn and protobuf cost ~17 ms of CPU at every start while they
// were linked into the executables, issue 16).
// Allocator: at glibc's default (dynamic) mmap and trim thresholds, tiled inference with the shipped
// model took 45-65 page faults per forward call of 4 x 128^2 tiles in porebench_bench (perf stat over
// 4-20 iterations of BM_NeuralHarness[Bare]; ~15 us each on this VM (models/ENGINES.md),
// several % of a call); none per call with these settings. So buffers up to
// 32 MiB come from the heap and up to 64 MiB of free heap is kept for the process (volumes, larger,
// are still mapped and given back). The LibTorch engine keeps more (engine_modules/torch.cpp).
#include <malloc.h>

#include <opencv2/core.hpp>
#include <opencv2/core/utils/logger.hpp>
#include <opencv2/dnn.hpp>

#include <regex>
#include <string>

#include "methods/engine_modules/engine_abi.h"

struct pb_engine_model {
  cv::dnn::Net net;
  cv::Mat output;
};

namespace {

thread_local std::string g_error;

// Names the first layer that fails by running the network up to each layer in turn.
std::string failing_layer(cv::dnn::Net& net, const cv::Mat& blob) {
  try {
    for (const auto& name : net.getLayerNames()) {
      try {
        net.setInput(blob);
        net.forward(name);
      } catch (const cv::Exception&) {
        const auto layer = net.getLayer(name);
        return " (layer '" + name + "' of type " + (layer ? layer->type : std::string("?")) + " is not supported)";
      }
    }
  } catch (...) {
  }
  return "";
}

}  // namespace

#define PB_EXPORT extern "C" __attribute__((visibility("default")))

PB_EXPORT int pb_engine_abi(void) { return PB_ENGINE_ABI; }
PB_EXPORT const char* pb_engine_name(void) { return "opencv-dnn " CV_VERSION; }
PB_EXPORT const char* pb_engine_error(void) { return g_error.c_str(); }

PB_EXPORT pb_engine_model* pb_engine_load(const char* path, int threads) {
  try {
    // Failures are reported to the caller; OpenCV's own log lines would only repeat them.
    cv::utils::logging::setLogLevel(cv::utils::logging::LOG_LEVEL_SILENT);
    mallopt(M_MMAP_THRESHOLD, 32 << 20);
    mallopt(M_TRIM_THRESHOLD, 64 << 20);
    auto m = std::make_unique<pb_engine_model>();
    try {
      m->net = cv::dnn::readNetFromONNX(path);
    } catch (const cv::Exception& e) {
      // The importer names the node it cannot handle: "Node [Type@domain]:(name) parse error".
      std::smatch s;
      const std::string layer = std::regex_search(e.msg, s, std::regex(R"(Node \[([^@\]]+)@[^\]]*\]:\(([^)]*)\))"))
                                    ? " (layer '" + s[2].str() + "' of type " + s[1].str() + " is not supported)"
                                    : "";
      g_error = std::string("OpenCV dnn cannot read ") + path + " as ONNX" + layer + ": " + e.msg;
      return nullptr;
    }
    if (m->net.empty()) {
      g_error = std::string(path) + " holds no network";
      return nullptr;
    }
    m->net.setPreferableBackend(cv::dnn::DNN_BACKEND_OPENCV);
    m->net.setPreferableTarget(cv::dnn::DNN_TARGET_CPU);
    cv::setNumThreads(threads);
    return m.release();
  } catch (const std::exception& e) {
    g_error = std::string("OpenCV dnn cannot read ") + path + " as ONNX: " + e.what();
  } catch (...) {
    g_error = std::string("OpenCV dnn cannot read ") + path + " as ONNX: unknown error";
  }
  return nullptr;
}

PB_EXPORT int pb_engine_run(pb_engine_model* m, const float* input, const int64_t* shape, size_t ndim) {
  try {
    std::vector<int> sizes(shape, shape + ndim);
    const cv::Mat blob(int(sizes.size()), sizes.data(), CV_32F, const_cast<float*>(input));
    try {
      m->net.setInput(blob);
      m->output = m->net.forward();
    } catch (const cv::Exception& e) {
      g_error = failing_layer(m->net, blob) + ": " + e.msg;
      return 2;
    }
    if (!m->output.isContinuous() || m->output.type() != CV_32F) {
      g_error = "a non-float output";
      return 1;
    }
    return 0;
  } catch (const std::exception& e) {
    g_error = std::string(": ") + e.what();
  } catch (...) {
    g_error = ": unknown error";
  }
  return 2;
}

PB_EXPORT size_t pb_engine_output(const pb_engine_model* m, int64_t* shape, size_t max_ndim, const float** data,
                                  size_t* count) {
  const cv::Mat& y = m->output;
  for (int i = 0; i < y.dims && size_t(i) < max_ndim; ++i) shape[i] = y.size[i];
  *data = y.ptr<float>();
  *count = y.total();
  return size_t(y.dims);
}

PB_EXPORT void pb_engine_free(pb_engine_model* m) { delete m; }
