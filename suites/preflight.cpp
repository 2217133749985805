// Checks before any work (see preflight.hpp).
#include "suites/preflight.hpp"

#include <unistd.h>

#include <cerrno>
#include <cmath>
#include <cstring>
#include <filesystem>

#include "core/error.hpp"
#include "core/format.hpp"
#include "core/io.hpp"
#include "core/io_header.hpp"
#include "core/text_file.hpp"
#include "metrics/score.hpp"
#include "suites/paired.hpp"
#include "suites/predictions.hpp"
#include "synthetic/recipe.hpp"

namespace fs = std::filesystem;

namespace pb::suite {

namespace {

void check_readable_file(const std::string& path, const std::string& what) {
  std::error_code ec;
  if (!fs::exists(path, ec)) throw InputError(what + " not found: " + path);
  if (fs::is_directory(path, ec)) throw InputError(what + " " + path + " is a folder; give a file");
  if (::access(path.c_str(), R_OK) != 0) throw InputError("cannot read " + what + " " + path + ": " + std::strerror(errno));
}

std::string num(double v) { return format_number(v, 6, nullptr); }

Json read_json_named(const std::string& path, const std::string& what) {
  const std::string text = read_text_file(path, what, kMaxRecordFileBytes);
  try {
    return Json::parse(text);
  } catch (const std::exception& e) {
    throw InputError(what + " " + path + " is not valid JSON (damaged or cut short?): " + e.what());
  }
}

}  // namespace

Suite load_suite_checked(const std::string& path) {
  std::error_code ec;
  if (fs::is_directory(path, ec))
    throw InputError("suite " + path + " is a folder; give a suite file (.toml), e.g. suites/quick.toml");
  check_readable_file(path, "suite file");
  return load_suite(path);
}

void preflight(const Suite& s) {
  const std::string where = "suite " + s.path + ": ";
  for (const auto& c : s.criteria)
    if (!std::isfinite(c.value))
      throw InputError(where + "[criteria] " + c.key + " = " + num(c.value) + " is not a finite number");
  try {
    const MatchRule m = parse_match_rule(s.scoring.match);
    if (m.kind != MatchRule::any && !(m.threshold > 0 && m.threshold <= 1))
      throw InputError("'" + s.scoring.match + "': the fraction must be in (0, 1]");
  } catch (const InputError& e) {
    throw InputError(where + "[scoring] match = '" + s.scoring.match + "': " + e.what());
  }
  if (!(s.calibration.fraction > 0 && s.calibration.fraction < 1))
    throw InputError(where + "[calibration] fraction = " + num(s.calibration.fraction) + " must be in (0, 1)");
  for (const auto& d : s.datasets) {
    const std::string dw = where + "dataset '" + d.name + "': ";
    try {
      if (d.kind == DatasetSpec::synthetic) {
        if (!d.recipe.empty()) check_readable_file(d.recipe, "recipe");
        synth::Recipe r = d.preset.empty() ? synth::load_recipe(d.recipe) : synth::preset(d.preset);
        r = synth::apply_overrides(r, d.overrides);
        synth::validate(r);
        continue;
      }
      preflight_paired(d);  // every file present and sound, float scans finite, no conflicting geometry (suites/paired)
    } catch (const InputError& e) {
      throw InputError(dw + e.what());
    }
  }
  preflight_predictions(s);  // every prediction file of a predictions method (suites/predictions)
}

void check_run_record(const Json& rec, const std::string& path) {
  auto bad = [&](const std::string& field, const std::string& want) {
    const std::string got = !rec.is_object() ? "the file is not an object"
                            : field.find('.') == std::string::npos && !rec.contains(field) ? "missing"
                                                                                           : "of the wrong type";
    throw InputError("run record " + path + ": field '" + field + "' must be " + want + " (" + got +
                     "); the folder was not written by this porebench, or was edited: run the suite again into a fresh folder");
  };
  if (!rec.is_object()) bad("(top level)", "an object");
  auto need = [&](const char* key, Json::value_t type, const char* want) {
    if (!rec.contains(key) || rec[key].type() != type) bad(key, want);
  };
  need("suite", Json::value_t::object, "an object");
  for (const char* k : {"name", "description"})
    if (!rec["suite"].contains(k) || !rec["suite"][k].is_string()) bad(std::string("suite.") + k, "a string");
  // suite.path: in every suite.json and results.json, not in a regression record (machine-free)
  if (rec["suite"].contains("path") && !rec["suite"]["path"].is_string()) bad("suite.path", "a string");
  need("suite_sha256", Json::value_t::string, "a string");
  need("calibration", Json::value_t::object, "an object");
  if (!rec["calibration"].contains("objective") || !rec["calibration"]["objective"].is_string())
    bad("calibration.objective", "a string");
  need("scoring", Json::value_t::object, "an object");
  need("criteria", Json::value_t::array, "an array");
  need("methods", Json::value_t::array, "an array");
  need("datasets", Json::value_t::array, "an array");
  for (const auto& m : rec["methods"])
    if (!m.is_object() || !m.contains("label") || !m["label"].is_string()) bad("methods[].label", "a string in every method");
  for (const auto& d : rec["datasets"])
    if (!d.is_object() || !d.contains("name") || !d["name"].is_string()) bad("datasets[].name", "a string in every dataset");
}

Json load_suite_record(const std::string& dir) {
  std::error_code ec;
  if (!fs::is_directory(dir, ec)) throw InputError("run folder " + dir + " not found");
  const std::string path = (fs::path(dir) / "suite.json").string();
  Json rec = read_json_named(path, "run record");
  check_run_record(rec, path);
  return rec;
}

std::vector<Json> load_checked_cells(const std::string& dir, const std::string& suite_sha256) {
  const fs::path cells_dir = fs::path(dir) / "cells";
  std::error_code ec;
  if (!fs::is_directory(cells_dir, ec))
    throw InputError("run folder " + dir + " has no cells/ folder (deleted?): run the suite again with -o " + dir +
                     " --resume");
  std::vector<fs::path> files;
  for (const auto& e : fs::directory_iterator(cells_dir, ec))
    if (e.path().extension() == ".json" && e.path().filename().string()[0] != '.') files.push_back(e.path());
  if (ec) throw InputError("cannot read " + cells_dir.string() + ": " + ec.message());
  std::sort(files.begin(), files.end());
  std::vector<Json> cells;
  for (const auto& p : files) {
    Json c = read_json_named(p.string(), "cell");
    if (!c.is_object() || !c.contains("index") || !c["index"].is_number_unsigned() || !c.contains("id"))
      throw InputError("cell " + p.string() + " is not a cell record (no id or index)");
    if (!c.contains("suite_sha256") || !c["suite_sha256"].is_string())
      throw InputError("cell " + p.string() + " carries no suite_sha256 (written by an older porebench or another "
                       "tool): the run folder cannot be checked; run the suite again into a fresh folder");
    if (c["suite_sha256"].get<std::string>() != suite_sha256)
      throw InputError("cell " + p.string() + " belongs to another run (suite_sha256 " +
                       c["suite_sha256"].get<std::string>().substr(0, 12) + "..., this folder's suite.json " +
                       suite_sha256.substr(0, 12) + "...): the folder mixes runs; remove the foreign cells or use "
                       "another folder");
    cells.push_back(std::move(c));
  }
  return cells;
}

}  // namespace pb::suite
