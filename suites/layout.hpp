#pragma once
// The layout of a run folder, shared by the runner (which writes it) and the reports (which read
// it): DIR/suite.json (the suite record), DIR/cells/<cell>.json and .png, DIR/data/<dataset>/.
#include <string>

#include "core/json.hpp"

namespace pb::suite {

// A name made safe for file names: every character other than [A-Za-z0-9._-] becomes '_'. Cell,
// dataset and montage files are named with it; the pages link to them with it.
std::string file_token(std::string s);

// A JSON file of the run folder; InputError naming the file when it is missing or not JSON.
nlohmann::ordered_json read_json_file(const std::string& path);

}  // namespace pb::suite
