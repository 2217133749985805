#pragma once
// The context block that opens every results file: tool version and git hash, dependency
// versions, host, threads, time.
#include "core/json.hpp"

namespace pb {

nlohmann::ordered_json run_context();
std::string itk_version();  // io_itk.cpp

}  // namespace pb
