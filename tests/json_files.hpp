#pragma once
// Small file helpers shared by the tests: a whole file read or written as bytes, a JSON record read.
#include <catch2/catch.hpp>
#include <filesystem>
#include <fstream>
#include <sstream>
#include <string>

#include "core/json.hpp"

namespace pbtest {

// Writes TEXT to PATH as it is (bytes), creating its folder.
inline void write_file(const std::string& path, const std::string& text) {
  const std::filesystem::path p(path);
  if (p.has_parent_path()) std::filesystem::create_directories(p.parent_path());
  std::ofstream f(path, std::ios::binary);
  f << text;
}

inline nlohmann::ordered_json read_json(const std::string& path) {
  std::ifstream f(path);
  REQUIRE(f);
  return nlohmann::ordered_json::parse(f);
}

// The whole file as text ("" when it cannot be read).
inline std::string read_text(const std::string& path) {
  std::ifstream f(path, std::ios::binary);
  std::stringstream s;
  s << f.rdbuf();
  return s.str();
}

}  // namespace pbtest
