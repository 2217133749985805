#pragma once
// Errors and exit codes shared by the library and the command line.
// Exit codes: 0 success, 1 acceptance criteria not met, 2 bad usage or bad input, 3 internal error.
#include <stdexcept>
#include <string>

namespace pb {

enum ExitCode : int { kExitOk = 0, kExitCriteria = 1, kExitBadInput = 2, kExitInternal = 3 };

// Bad input or bad usage: the message names the file, field and value at fault. Exit code 2.
struct InputError : std::runtime_error {
  using std::runtime_error::runtime_error;
};

// Acceptance criteria were evaluated and failed. Exit code 1.
struct CriteriaFailed : std::runtime_error {
  using std::runtime_error::runtime_error;
};

}  // namespace pb
