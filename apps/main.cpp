// porebench: trials of CT pore-segmentation methods against paired references.
// Exit codes: 0 success, 1 acceptance criteria not met (run, compare), 2 bad usage or input, 3 internal
// error. `report` exits 0 once it has rendered: it prints the verdict but does not judge.
#include <algorithm>
#include <cstdio>
#include <filesystem>
#include <iostream>
#include <new>
#include <stdexcept>
#include <tuple>

#include "apps/cli.hpp"
#include "build_info.hpp"
#include "core/cpu.hpp"
#include "core/error.hpp"
#include "core/names.hpp"
#include "core/npy.hpp"
#include "core/parallel.hpp"
#include "core/text_file.hpp"
#include "suites/preflight.hpp"

namespace pb::cli {

namespace {
Globals g_globals;
}
const Globals& globals() { return g_globals; }

std::vector<CommandDef>& commands() {
  static std::vector<CommandDef> c;
  return c;
}
bool add_command(CommandDef c) {
  commands().push_back(std::move(c));
  return true;
}

void log(const std::string& msg) {
  if (!g_globals.quiet) std::cerr << msg << '\n';
}

void ReadArgs::add_to(CLI::App* cmd) {
  cmd->add_option("--raw-dims", raw_dims, "raw input: voxels along x,y,z")->delimiter(',')->expected(3);
  cmd->add_option("--raw-type", raw_type, "raw input: uint8, uint16, int16 or float32");
  cmd->add_option("--raw-endian", raw_endian, "raw input: little or big")->check(CLI::IsMember({"little", "big"}));
  cmd->add_option("--raw-header", raw_header, "raw input: bytes to skip before the voxels");
  cmd->add_option("--spacing", spacing, "voxel size x,y,z in mm (required for raw; overrides the file)")
      ->delimiter(',')
      ->expected(3);
  cmd->add_flag("--allow-nonfinite", allow_nonfinite,
                "accept NaN and +-Inf voxels in float input: they are set to NaN, never called air and left out "
                "of statistics and histograms (refused with their count otherwise)");
}

ReadOptions ReadArgs::options(const std::string& input) const {
  ReadOptions o;
  o.allow_nonfinite = allow_nonfinite;
  const bool raw = !raw_dims.empty() || !raw_type.empty();
  if (!spacing.empty()) o.spacing_mm = std::array<double, 3>{spacing[0], spacing[1], spacing[2]};
  const std::string ext = lower_extension(input);
  std::error_code ec;
  if (!raw && spacing.empty() && (ext == ".tif" || ext == ".tiff" || (std::filesystem::is_directory(input, ec) && !is_dicom(input))))
    log("porebench: warning: " + input + " is TIFF, which stores no z spacing: it is read with 1 mm slices (x and y "
        "from its resolution tags, else 1 mm); give --spacing X,Y,Z in mm");
  if (raw) {
    if (raw_dims.size() != 3) throw InputError("raw input " + input + ": --raw-dims X,Y,Z is required");
    if (raw_type.empty()) throw InputError("raw input " + input + ": --raw-type is required");
    if (spacing.empty()) throw InputError("raw input " + input + ": --spacing X,Y,Z (mm) is required");
    RawSpec r;
    r.dims = {raw_dims[0], raw_dims[1], raw_dims[2]};
    r.type = parse_voxel_type(raw_type);
    r.big_endian = raw_endian == "big";
    r.header_bytes = raw_header;
    r.spacing_mm = *o.spacing_mm;
    o.raw = r;
  }
  return o;
}

nlohmann::ordered_json load_results(const std::string& dir) {
  const std::string path = dir + "/results.json";
  std::error_code ec;
  if (!std::filesystem::exists(path, ec)) throw InputError("no results.json in " + dir + " (run the suite there first)");
  const std::string text = read_text_file(path, "results", kMaxRecordFileBytes);
  nlohmann::ordered_json j;
  try {
    j = nlohmann::ordered_json::parse(text);
  } catch (const std::exception& e) {
    throw InputError("cannot parse " + path + ": " + e.what());
  }
  suite::check_run_record(j, path);  // the top-level shape; deeper fields: reading_records
  return j;
}

}  // namespace pb::cli

int main(int argc, char** argv) {
  using namespace pb;
  CLI::App app{"porebench: put CT pore-segmentation methods on trial against paired references"};
  app.set_version_flag("--version", std::string(build::version) + " (" + build::git_hash + ")");
  app.add_option("--threads", cli::g_globals.threads, "worker threads (default: all cores)")->check(CLI::NonNegativeNumber);
  app.add_flag("--quiet", cli::g_globals.quiet, "print only results and errors");
  app.add_option("--simd", cli::g_globals.simd,
                 "SIMD kernels: auto (best this CPU has), avx512, avx2 or generic; results agree to float rounding "
                 "across levels, and are bit-identical for one level whatever --threads")
      ->check(CLI::IsMember({"auto", "avx512", "avx2", "generic"}));
  app.require_subcommand(1);
  app.fallthrough();
  auto& defs = cli::commands();
  // By help order, then by name: commands that share an order keep one place whatever the link order.
  std::sort(defs.begin(), defs.end(), [](auto& a, auto& b) { return std::tie(a.order, a.name) < std::tie(b.order, b.name); });
  std::vector<std::pair<CLI::App*, cli::Action>> actions;
  for (auto& d : defs) {
    CLI::App* sub = app.add_subcommand(d.name);
    actions.emplace_back(sub, d.setup(*sub));
  }
  // An unknown command word is named, with the closest command (CLI11 would only say that a
  // subcommand is required). Global options before it are skipped with their values.
  for (int i = 1; i < argc; ++i) {
    const std::string w = argv[i];
    if (w == "--threads" || w == "--simd") {
      ++i;
      continue;
    }
    if (w.empty() || w[0] == '-') continue;
    std::vector<std::string> names;
    for (const auto& d : defs) names.push_back(d.name);
    if (std::find(names.begin(), names.end(), w) != names.end()) break;
    const std::string close = closest_name(w, names);
    std::string list;
    for (const auto& n : names) list += (list.empty() ? "" : ", ") + n;
    std::cerr << "porebench: error: unknown command '" << w << "'" << (close.empty() ? "" : "; did you mean '" + close + "'?")
              << "\ncommands: " << list << " (porebench --help)\n";
    return kExitBadInput;
  }
  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    const int rc = app.exit(e);
    return rc == 0 ? 0 : kExitBadInput;
  }
  try {
    set_threads(cli::g_globals.threads);
    set_read_note([](const std::string& m) { cli::log("porebench: note: " + m); });
    const std::string& simd = cli::g_globals.simd;
    set_simd_cap(simd == "generic" ? Simd::generic : simd == "avx2" ? Simd::avx2 : Simd::avx512);
    for (auto& [sub, action] : actions)
      if (sub->parsed()) return action();
  } catch (const InputError& e) {
    std::cerr << "porebench: error: " << e.what() << '\n';
    return kExitBadInput;
  } catch (const CriteriaFailed& e) {
    std::cerr << "porebench: " << e.what() << '\n';
    return kExitCriteria;
  } catch (const std::bad_alloc&) {
    // The size checks come first (core/memory.hpp); this is the last guard.
    std::cerr << "porebench: error: out of memory: the request does not fit this machine (lower the sizes, or "
                 "set PB_MEMORY_BUDGET_MB)\n";
    return kExitBadInput;
  } catch (const std::length_error& e) {
    std::cerr << "porebench: error: a size is too large: " << e.what() << '\n';
    return kExitBadInput;
  } catch (const std::exception& e) {
    std::cerr << "porebench: internal error: " << e.what() << '\n';
    return kExitInternal;
  }
  return kExitInternal;
}
