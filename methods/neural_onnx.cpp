// The OpenCV dnn engine of the neural family: ONNX models (2D, 2.5D, and 3D ones OpenCV runs:
// Conv3d and MaxPool3d, not ConvTranspose3d in 4.6). The only file that sees opencv2/dnn.
#include <opencv2/core.hpp>
#include <opencv2/core/utils/logger.hpp>
#include <opencv2/dnn.hpp>

#include <regex>

#include "core/error.hpp"
#include "methods/neural.hpp"

namespace pb {
namespace {

class OnnxEngine : public Engine {
 public:
  OnnxEngine(const ModelCard& c, int threads) : card_(c) {
    // Failures are reported as InputErrors; OpenCV's own log lines would only repeat them.
    cv::utils::logging::setLogLevel(cv::utils::logging::LOG_LEVEL_SILENT);
    try {
      net_ = cv::dnn::readNetFromONNX(c.model_path);
    } catch (const cv::Exception& e) {
      // The importer names the node it cannot handle: "Node [Type@domain]:(name) parse error".
      std::smatch m;
      const std::string layer = std::regex_search(e.msg, m, std::regex(R"(Node \[([^@\]]+)@[^\]]*\]:\(([^)]*)\))"))
                                    ? " (layer '" + m[2].str() + "' of type " + m[1].str() + " is not supported)"
                                    : "";
      throw InputError("model card " + c.card_path + ": field 'file' = '" + c.file + "': OpenCV dnn cannot read " +
                       c.model_path + " as ONNX" + layer + ": " + e.msg);
    }
    if (net_.empty())
      throw InputError("model card " + c.card_path + ": field 'file' = '" + c.file + "': " + c.model_path +
                       " holds no network");
    net_.setPreferableBackend(cv::dnn::DNN_BACKEND_OPENCV);
    net_.setPreferableTarget(cv::dnn::DNN_TARGET_CPU);
    cv::setNumThreads(threads);
  }

  std::vector<int64_t> run(const float* input, const std::vector<int64_t>& shape, std::vector<float>& out) override {
    std::vector<int> sizes(shape.begin(), shape.end());
    const cv::Mat blob(int(sizes.size()), sizes.data(), CV_32F, const_cast<float*>(input));
    cv::Mat y;
    try {
      net_.setInput(blob);
      y = net_.forward();
    } catch (const cv::Exception& e) {
      throw InputError("model card " + card_.card_path + ": model " + card_.model_path + " fails on an input of shape " +
                       shape_text(shape) + failing_layer(blob) + ": " + e.msg);
    }
    std::vector<int64_t> out_shape(size_t(y.dims));
    for (int i = 0; i < y.dims; ++i) out_shape[size_t(i)] = y.size[i];
    if (!y.isContinuous() || y.type() != CV_32F)
      throw InputError("model card " + card_.card_path + ": model " + card_.model_path + " returns a non-float output");
    out.assign(y.ptr<float>(), y.ptr<float>() + y.total());
    return out_shape;
  }

  std::string engine_name() const override { return std::string("opencv-dnn ") + CV_VERSION; }

 private:
  static std::string shape_text(const std::vector<int64_t>& s) {
    std::string t = "[";
    for (size_t i = 0; i < s.size(); ++i) t += (i ? ", " : "") + std::to_string(s[i]);
    return t + "]";
  }
  // Names the first layer that fails by running the network up to each layer in turn.
  std::string failing_layer(const cv::Mat& blob) {
    try {
      for (const auto& name : net_.getLayerNames()) {
        try {
          net_.setInput(blob);
          net_.forward(name);
        } catch (const cv::Exception&) {
          const auto layer = net_.getLayer(name);
          return " (layer '" + name + "' of type " + (layer ? layer->type : std::string("?")) + " is not supported)";
        }
      }
    } catch (...) {
    }
    return "";
  }

  ModelCard card_;
  cv::dnn::Net net_;
};

}  // namespace

std::unique_ptr<Engine> open_onnx_engine(const ModelCard& c, int threads) {
  return std::make_unique<OnnxEngine>(c, threads);
}

}  // namespace pb
