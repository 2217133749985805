#pragma once
// Subcommand registration for the porebench command line. Each apps/cmd_*.cpp file adds its
// subcommands with PB_REGISTER_COMMAND; main.cpp knows none of them by name.
#include <CLI/CLI.hpp>
#include <array>
#include <functional>
#include <optional>
#include <string>
#include <vector>

#include "core/io.hpp"
#include "core/json.hpp"

namespace pb::cli {

struct Globals {
  int threads = 0;
  bool quiet = false;
  std::string simd = "auto";  // cap on hand-written SIMD kernels (core/cpu.hpp)
};
const Globals& globals();

// A command adds its subcommand to the app and returns the action to run when it was chosen.
using Action = std::function<int()>;
using Setup = std::function<Action(CLI::App& app)>;
struct CommandDef {
  std::string name;
  int order;  // position in --help
  Setup setup;
};
bool add_command(CommandDef c);
std::vector<CommandDef>& commands();

// Raw-geometry and spacing options shared by commands that read volumes.
struct ReadArgs {
  std::vector<int64_t> raw_dims;
  std::string raw_type;
  std::string raw_endian = "little";
  uint64_t raw_header = 0;
  std::vector<double> spacing;
  bool allow_nonfinite = false;
  void add_to(CLI::App* cmd);
  ReadOptions options(const std::string& input) const;  // validates; throws InputError
};

void log(const std::string& msg);  // to stderr unless --quiet

// DIR/results.json of a suite run; InputError naming the file when it is missing or not JSON.
nlohmann::ordered_json load_results(const std::string& dir);

#define PB_CLI_CONCAT_INNER(a, b) a##b
#define PB_CLI_CONCAT(a, b) PB_CLI_CONCAT_INNER(a, b)
#define PB_REGISTER_COMMAND(name, order, setup) \
  static const bool PB_CLI_CONCAT(pb_command_, __LINE__) = ::pb::cli::add_command({name, order, setup})

}  // namespace pb::cli
