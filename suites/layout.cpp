// The layout of a run folder (see layout.hpp).
#include "suites/layout.hpp"

#include <cctype>

#include "core/error.hpp"
#include "core/text_file.hpp"

namespace pb::suite {

std::string file_token(std::string s) {
  for (char& c : s)
    if (!(std::isalnum(static_cast<unsigned char>(c)) || c == '-' || c == '_' || c == '.')) c = '_';
  return s;
}

nlohmann::ordered_json read_json_file(const std::string& path) {
  const std::string text = read_text_file(path, "record", kMaxRecordFileBytes);
  try {
    return nlohmann::ordered_json::parse(text);
  } catch (const std::exception& e) {
    throw InputError("cannot parse " + path + ": " + e.what());
  }
}

}  // namespace pb::suite
