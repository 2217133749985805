// libFuzzer target: the suite reader (suites/suite.hpp parse_suite) and the checks made before any
// work (suites/preflight.hpp). Bad input must end in InputError: no crash, no hang.
#include <cstddef>
#include <cstdint>
#include <string>

#include "core/error.hpp"
#include "core/memory.hpp"
#include "suites/preflight.hpp"
#include "suites/suite.hpp"

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  pb::set_memory_budget_bytes(uint64_t(64) << 20);
  const std::string text(reinterpret_cast<const char*>(data), size);
  try {
    const pb::suite::Suite s = pb::suite::parse_suite(text, "/nonexistent-fuzz-dir/suite.toml");
    pb::suite::preflight(s);
  } catch (const pb::InputError&) {
  }
  return 0;
}
