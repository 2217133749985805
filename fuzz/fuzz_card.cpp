// libFuzzer target: the model-card reader (methods/neural.hpp parse_model_card) and what a card
// feeds before any model runs (tile origins along a few axis lengths). The card's folder holds a
// model.onnx and a weights.pt, so the shipped cards' file names resolve. Bad input must end in
// InputError naming the card: anything else that escapes, and any crash or hang, is a finding.
#include <unistd.h>

#include <cstddef>
#include <cstdint>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <string>

#include "core/error.hpp"
#include "methods/neural.hpp"

namespace {
struct CardFolder {  // removed at exit
  std::filesystem::path dir =
      std::filesystem::temp_directory_path() / ("pb-fuzz-card-" + std::to_string(::getpid()));
  CardFolder() {
    std::filesystem::create_directories(dir);
    for (const char* f : {"model.onnx", "weights.pt"}) std::ofstream(dir / f) << "not a model";
  }
  ~CardFolder() {
    std::error_code ec;
    std::filesystem::remove_all(dir, ec);
  }
};
const std::string& card_path() {
  static const CardFolder folder;
  static const std::string path = (folder.dir / "card.json").string();
  return path;
}
}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  const std::string text(reinterpret_cast<const char*>(data), size);
  try {
    const pb::ModelCard c = pb::parse_model_card(text, card_path());
    for (int64_t n : {1, 7, 64, 1000})
      for (int64_t t : c.tile) {
        const auto o = pb::tile_origins(n, t, c.overlap);
        if (o.empty() || o.back() + t < n) std::abort();  // the last tile must reach the end
      }
  } catch (const pb::InputError&) {
  }
  return 0;
}
