#pragma once
// nlohmann::json for all of porebench: include this, never <nlohmann/json.hpp> directly
// (tests/test_layers.cpp checks). It turns the library's internal assertions into an exception.
// Why: reading a key a record lacks through a const json (`rec["cells"]` on a record without
// cells) is an assertion in nlohmann, i.e. undefined behaviour in a Release build, and the records
// porebench renders (suite.json, cells, results.json) come from files a user may have edited or
// truncated. With this header it throws pb::JsonPreconditionFailed, which the places that read
// such files turn into a message naming the file (exit 2); anywhere else it is a bug (exit 3).
#include <stdexcept>
#include <string>

namespace pb {

struct JsonPreconditionFailed : std::logic_error {
  using std::logic_error::logic_error;
};

[[noreturn]] inline void json_precondition_failed(const char* expr) {
  throw JsonPreconditionFailed(std::string("a JSON record lacks a field or has one of another type (") + expr + ")");
}

}  // namespace pb

#ifdef JSON_ASSERT
#error "core/json.hpp must be the first to define JSON_ASSERT (include it instead of <nlohmann/json.hpp>)"
#endif
#define JSON_ASSERT(x) ((x) ? static_cast<void>(0) : ::pb::json_precondition_failed(#x))
#include <nlohmann/json.hpp>

#include "core/error.hpp"

namespace pb {

// Runs `read`, which reads records that came from the file(s) `what` names, and turns a missing
// or mistyped field (JsonPreconditionFailed, nlohmann's type and range errors) into InputError
// naming them: such a file was edited, truncated or written by another version.
template <class Read>
auto reading_records(const std::string& what, Read&& read) -> decltype(read()) {
  try {
    return read();
  } catch (const JsonPreconditionFailed& e) {
    throw InputError(what + ": " + e.what() + "; was it edited, or written by another porebench version?");
  } catch (const nlohmann::json::exception& e) {
    throw InputError(what + ": a field has an unexpected type or value (" + e.what() +
                     "); was it edited, or written by another porebench version?");
  }
}

}  // namespace pb
