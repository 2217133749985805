#pragma once
// Shared by the paired-suite tests: a suite text that must be refused at parse or preflight.
#include <catch2/catch.hpp>
#include <string>
#include <vector>

#include "core/error.hpp"
#include "core/io.hpp"
#include "suites/preflight.hpp"
#include "suites/suite.hpp"

namespace pbtest {

// Writes `text` to `suite_path`, loads and preflights it, and checks that an InputError names the
// suite file and contains every one of `words` (the field and the value).
inline void expect_suite_refused(const std::string& suite_path, const std::string& text,
                                 const std::vector<std::string>& words) {
  INFO(text);
  pb::write_text_atomic(suite_path, text);
  try {
    pb::suite::preflight(pb::suite::load_suite(suite_path));
    FAIL("accepted");
  } catch (const pb::InputError& e) {
    INFO(e.what());
    CHECK_THAT(e.what(), Catch::Contains(suite_path.substr(suite_path.find_last_of('/') + 1)));
    for (const auto& w : words) CHECK_THAT(e.what(), Catch::Contains(w));
  }
}

}  // namespace pbtest
