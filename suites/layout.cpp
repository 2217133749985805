// The layout of a run folder (see layout.hpp).
#include "suites/layout.hpp"

#include <cctype>
#include <fstream>

#include "core/error.hpp"

namespace pb::suite {

std::string file_token(std::string s) {
  for (char& c : s)
    if (!(std::isalnum(static_cast<unsigned char>(c)) || c == '-' || c == '_' || c == '.')) c = '_';
  return s;
}

nlohmann::ordered_json read_json_file(const std::string& path) {
  std::ifstream f(path);
  if (!f) throw InputError("cannot read " + path);
  try {
    return nlohmann::ordered_json::parse(f);
  } catch (const std::exception& e) {
    throw InputError("cannot parse " + path + ": " + e.what());
  }
}

}  // namespace pb::suite
