// core/text_file: the one reader of whole settings and record files. The reference is the bytes
// the test writes itself (an analytic case: what was written is what must come back, or a refusal
// naming the file).
#include <sys/stat.h>
#include <unistd.h>

#include <catch2/catch.hpp>
#include <string>

#include "core/error.hpp"
#include "core/text_file.hpp"
#include "helpers.hpp"
#include "json_files.hpp"

using pb::read_text_file;

TEST_CASE("read_text_file returns every byte, NULs and no trailing newline included", "[text_file]") {
  pbtest::TempDir d;
  std::string bytes = "name = \"gear blanks\"\n";
  bytes += std::string(1, '\0') + "\x93\xff tail";
  pbtest::write_file(d / "a.toml", bytes);
  CHECK(read_text_file(d / "a.toml", "suite file") == bytes);
  pbtest::write_file(d / "empty.json", "");
  CHECK(read_text_file(d / "empty.json", "record").empty());
}

TEST_CASE("read_text_file refuses what is not a whole readable file, naming it", "[text_file]") {
  pbtest::TempDir d;
  auto refused = [](const std::string& path, const std::string& what, uint64_t limit, const std::string& says) {
    try {
      read_text_file(path, what, limit);
      FAIL("no error for " << path);
    } catch (const pb::InputError& e) {
      const std::string m = e.what();
      CHECK(m.find(what + " " + path) != std::string::npos);
      CHECK(m.find(says) != std::string::npos);
    }
  };
  refused(d / "nowhere.toml", "suite file", pb::kMaxSettingsFileBytes, "is missing");
  refused(d.path.string(), "recipe", pb::kMaxSettingsFileBytes, "is a folder");
  pbtest::write_file(d / "big.json", std::string(1001, 'x'));
  refused(d / "big.json", "model card", 1000, "has 1001 bytes, more than the 1000");
  CHECK(read_text_file(d / "big.json", "model card", 1001).size() == 1001);
  REQUIRE(::mkfifo((d / "pipe").c_str(), 0600) == 0);  // would block a reader that waits for data
  refused(d / "pipe", "prediction sidecar", pb::kMaxSettingsFileBytes, "is not a regular file");
  if (::geteuid() != 0) {  // root reads a file without permissions
    pbtest::write_file(d / "closed.toml", "x");
    ::chmod((d / "closed.toml").c_str(), 0);
    refused(d / "closed.toml", "suite file", pb::kMaxSettingsFileBytes, "cannot be opened");
  }
}
