// Suites and the runner: parsing with positions, grid expansion, calibration split, criteria,
// resume after SIGKILL, compare, and the committed reference run of suites/quick.toml.
#include <signal.h>
#include <unistd.h>

#include <catch2/catch.hpp>
#include <chrono>
#include <fstream>
#include <thread>

#include "core/error.hpp"
#include "core/json.hpp"
#include "report/compare.hpp"
#include "report/report.hpp"
#include "suites/preflight.hpp"
#include "suites/results.hpp"
#include "suites/suite.hpp"
#include "tests/helpers.hpp"
#include "tests/json_files.hpp"

using namespace pb;
using namespace pb::suite;
using pbtest::run_cli;
using pbtest::TempDir;
using Json = nlohmann::ordered_json;
using pbtest::read_json;
using pbtest::write_file;
namespace fs = std::filesystem;

namespace {

// A tiny synthetic trial: 40^3 voxels of 24 um, a reference scan and two faster ones.
const char* kTinySuite = R"(
[suite]
name = "tiny"
[[dataset]]
name = "blank"
kind = "synthetic"
preset = "demo-small"
set = { phantom = { dims = [40, 40, 40], voxel_size_um = 24 }, scan = { projections = [90, 45], reference_projections = 180 } }
[[method]]
name = "otsu"
[[method]]
name = "manual"
params = { threshold = [0.015, 0.03, 0.045] }
[[method]]
name = "median+otsu"
[calibration]
fraction = 0.4
gap_slices = 2
[criteria]
min_jaccard = %MINJ%
)";

std::string tiny_suite(double min_jaccard) {
  std::string s = kTinySuite;
  s.replace(s.find("%MINJ%"), 6, std::to_string(min_jaccard));
  return s;
}

void expect_suite_error(const std::string& text, const std::vector<std::string>& words) {
  INFO(text);
  try {
    parse_suite(text, "bad.toml");
    FAIL("no error");
  } catch (const InputError& e) {
    INFO(e.what());
    for (const auto& w : words) CHECK_THAT(e.what(), Catch::Contains(w));
  }
}

const char* kMinimal = "[[dataset]]\nname = \"d\"\npreset = \"demo-small\"\n[[method]]\nname = \"otsu\"\n";

}  // namespace

TEST_CASE("suite errors name the file, line and column, and the closest valid key", "[suite]") {
  expect_suite_error("[[dataset]\nname = 1", {"bad.toml:1:"});                                      // TOML syntax
  expect_suite_error(std::string(kMinimal) + "[calibraton]\nfraction = 0.3\n", {"bad.toml:6:", "unknown key 'calibraton'", "'calibration'"});
  expect_suite_error("[[dataset]]\nname = \"d\"\npreset = \"demo-small\"\nsett = {}\n[[method]]\nname = \"otsu\"\n",
                     {"bad.toml:4:", "unknown key 'sett'", "did you mean 'set'"});
  expect_suite_error(std::string(kMinimal) + "[criteria]\nmin_jacard = 0.5\n", {"bad.toml:7:", "min_jacard", "min_jaccard"});
  expect_suite_error(std::string(kMinimal) + "[[method]]\nname = \"sauvola\"\nparams = { window = [] }\n", {"empty grid", "window"});
  expect_suite_error(std::string(kMinimal) + "[[method]]\nname = \"otsuu\"\n", {"bad.toml:7:", "unknown method 'otsuu'"});
  expect_suite_error(std::string(kMinimal) + "[[method]]\nname = \"manual\"\nparams = { threshold = [1, \"x\"] }\n",
                     {"'threshold'", "not a number"});
  // Paired files are looked for at the preflight (a suite parses before its files are made).
  try {
    preflight(parse_suite("[[dataset]]\nname = \"p\"\nkind = \"paired\"\nscan = \"nope.mha\"\nreference_mask = \"r.mha\"\n[[method]]\nname = \"otsu\"\n",
                          "bad.toml"));
    FAIL("missing files accepted");
  } catch (const InputError& e) {
    for (const char* w : {"bad.toml", "dataset 'p'", "reference_mask (line 5)", "file not found", "r.mha"}) CHECK_THAT(e.what(), Catch::Contains(w));
  }
  expect_suite_error("[[method]]\nname = \"otsu\"\n", {"no [[dataset]]"});
  expect_suite_error(std::string(kMinimal) + "[[method]]\nname = \"otsu\"\n", {"label 'otsu' is used twice"});
}

TEST_CASE("a grid is the cartesian product of its lists, keys in name order, last fastest", "[suite]") {
  const Suite s = parse_suite(std::string(kMinimal) + "[[method]]\nname = \"sauvola\"\nparams = { window = [15, 31], k = [0.1, 0.2, 0.3] }\n",
                              "grid.toml");
  const ParamGrid& g = s.methods[1].grid;
  REQUIRE(g.size() == 6);  // 2 x 3
  CHECK(g.point(0) == std::vector<std::string>{"k=0.1", "window=15"});
  CHECK(g.point(1) == std::vector<std::string>{"k=0.1", "window=31"});
  CHECK(g.point(2) == std::vector<std::string>{"k=0.2", "window=15"});
  CHECK(g.point(5) == std::vector<std::string>{"k=0.3", "window=31"});
  CHECK(g.tuned());
  CHECK_FALSE(s.methods[0].grid.tuned());
}

TEST_CASE("a run: cells, calibration on held-out slices, criteria and exit codes", "[suite][run]") {
  TempDir d;
  write_file(d / "tiny.toml", tiny_suite(0.0));
  auto r = run_cli("--quiet run " + (d / "tiny.toml") + " -o " + (d / "out"));
  INFO(r.out << r.err);
  REQUIRE(r.exit_code == 0);
  const Json res = read_json(d / "out/results.json");
  for (const char* f : {"results.csv", "summary.md", "report.html", "validation-record.md", "suite.json"})
    CHECK(fs::exists(d.path / "out" / f));
  // 3 scans (reference, 90p, 45p) x (otsu 1 + manual 3 + median+otsu 1) = 15 cells, all ok.
  REQUIRE(res["cells"].size() == 15);
  for (const auto& c : res["cells"]) CHECK(c["status"] == "ok");
  // The calibration and test slices are disjoint, with the gap between them.
  const Json& sl = res["datasets"][0]["slices"];
  CHECK(sl["test"][0].get<int>() >= sl["calibration"][1].get<int>() + 2);
  // The tuned method's choice is the best calibration Jaccard of its grid, and it is reported
  // with its test-slice figures only.
  std::vector<Json> cells(res["cells"].begin(), res["cells"].end());
  for (const auto& s : res["selections"]) {
    if (s["method"] != "manual") continue;
    CHECK(s["tuned"] == true);
    double best = -1;
    std::string best_id;
    for (const auto& c : cells)
      if (c["scan"] == s["scan"] && c["method"] == "manual") {
        const double j = metric_value(c, "calibration", "jaccard");
        if (j > best) best = j, best_id = c["id"];
      }
    CHECK(s["chosen_cell"] == best_id);
  }
  CHECK(res["criteria_met"] == true);
  // results.csv rows: one per cell, part and metric (+2 run rows), with the documented header.
  std::ifstream csv(d / "out/results.csv");
  std::string header;
  std::getline(csv, header);
  CHECK(header == report::kCsvColumns);

  // An impossible criterion: the same run judged again fails with exit code 1.
  write_file(d / "strict.toml", tiny_suite(0.999));
  r = run_cli("--quiet run " + (d / "strict.toml") + " -o " + (d / "strict"));
  CHECK(r.exit_code == 1);
  CHECK(read_json(d / "strict/results.json")["criteria_met"] == false);
  // `report` renders and exits 0 whatever the verdict (judging is run's and compare's exit code);
  // it prints the verdict.
  r = run_cli("--quiet report " + (d / "strict"));
  CHECK(r.exit_code == 0);
  CHECK_THAT(r.out, Catch::Contains("NOT met"));
  // A second run into a used folder without --resume is refused.
  r = run_cli("--quiet run " + (d / "tiny.toml") + " -o " + (d / "out"));
  CHECK(r.exit_code == 2);
  CHECK_THAT(r.err, Catch::Contains("--resume"));
}

namespace {

// Starts `args` of porebench, SIGKILLs it once `dir`/cells holds at least `cells` cell records (or
// after 120 s), and returns how many it held then.
int kill_after_cells(const std::string& args, const fs::path& dir, int cells) {
  const std::string cmd = std::string(PB_CLI_PATH) + " " + args;
  const pid_t pid = fork();
  if (pid == 0) {
    execl("/bin/sh", "sh", "-c", ("exec " + cmd + " >/dev/null 2>&1").c_str(), (char*)nullptr);
    _exit(127);
  }
  const auto t0 = std::chrono::steady_clock::now();
  auto count_cells = [&] {
    int n = 0;
    std::error_code ec;
    if (fs::exists(dir / "cells"))
      for (auto& e : fs::directory_iterator(dir / "cells", ec))  // committed cells only: a cell being
        n += e.path().extension() == ".json" && e.path().filename().string()[0] != '.';  // written is .NAME.partial-*.json
    return n;
  };
  while (count_cells() < cells && std::chrono::steady_clock::now() - t0 < std::chrono::seconds(120))
    std::this_thread::sleep_for(std::chrono::milliseconds(20));
  kill(pid, SIGKILL);
  int status = 0;
  waitpid(pid, &status, 0);
  return count_cells();
}

// The interrupted run `cut` holds the cells of the uninterrupted run `whole` (none lost or
// duplicated; same figures, timings aside) and no temporary files.
void check_same_run(const fs::path& whole, const fs::path& cut) {
  const Json a = regression_record(read_json((whole / "results.json").string()));
  const Json b = regression_record(read_json((cut / "results.json").string()));
  REQUIRE(b["cells"].size() == 15);
  CHECK(a["cells"].dump() == b["cells"].dump());
  CHECK(a["selections"].dump() == b["selections"].dump());
  for (auto& e : fs::recursive_directory_iterator(cut))
    CHECK(e.path().filename().string().find(".partial-") == std::string::npos);
}

}  // namespace

TEST_CASE("SIGKILL mid-run, then --resume: same results as an uninterrupted run", "[suite][run]") {
  TempDir d;
  write_file(d / "tiny.toml", tiny_suite(0.0));
  REQUIRE(run_cli("--quiet run " + (d / "tiny.toml") + " -o " + (d / "whole")).exit_code == 0);
  // Start a run and kill it once a few cells are written.
  const int before = kill_after_cells("--quiet run " + (d / "tiny.toml") + " -o " + (d / "cut"), d.path / "cut", 4);
  INFO("cells before the kill: " << before);
  // Really interrupted, and after some cells were written (a kill before the first cell would
  // turn this into a fresh run and test nothing of resuming).
  REQUIRE(before >= 4);
  REQUIRE(before < 15);
  const auto r = run_cli("--quiet run " + (d / "tiny.toml") + " -o " + (d / "cut") + " --resume");
  INFO(r.err);
  REQUIRE(r.exit_code == 0);
  CHECK_THAT(r.out, Catch::Contains(std::to_string(before) + " already done"));
  check_same_run(d.path / "whole", d.path / "cut");
}

TEST_CASE("compare: identical runs show no difference; a worse candidate is a regression", "[suite][compare]") {
  TempDir d;
  // The "model" under test is a manual threshold: the candidate's is badly off.
  auto suite_with = [](const std::string& threshold) {
    return std::string("[[dataset]]\nname = \"blank\"\npreset = \"demo-small\"\n"
                       "set = { phantom = { dims = [40, 40, 40], voxel_size_um = 24 }, scan = { projections = [90], reference_projections = 180 } }\n"
                       "[[method]]\nname = \"manual\"\nlabel = \"model\"\nparams = { threshold = ") + threshold + " }\n";
  };
  write_file(d / "base.toml", suite_with("0.03"));
  write_file(d / "cand.toml", suite_with("0.012"));
  REQUIRE(run_cli("--quiet run " + (d / "base.toml") + " -o " + (d / "base")).exit_code == 0);
  REQUIRE(run_cli("--quiet run " + (d / "cand.toml") + " -o " + (d / "cand")).exit_code == 0);
  auto same = run_cli("compare " + (d / "base") + " " + (d / "base"));
  CHECK(same.exit_code == 0);
  CHECK_THAT(same.out, Catch::Contains("no tracked metric regresses"));
  auto worse = run_cli("compare " + (d / "base") + " " + (d / "cand") + " -o " + (d / "cmp.md"));
  INFO(worse.out);
  CHECK(worse.exit_code == 1);
  CHECK_THAT(worse.out, Catch::Contains("REGRESSION"));
  CHECK(fs::exists(d.path / "cmp.md"));
  CHECK(run_cli("compare " + (d / "base") + " " + (d / "cand") + " --metric nosuch").exit_code == 2);
}

TEST_CASE("quick suite: a fresh run shows no regression against the committed reference", "[suite][reference]") {
  // The reference was written by:  porebench run suites/quick.toml -o results/quick &&
  //   porebench report results/quick --reference-record results/reference/quick/results.json
  // The run is deterministic; float results of FFT codelets may differ between CPUs in the last
  // bits, so "no regression" is judged by compare with tight tolerances rather than byte equality.
  const std::string src = std::string(PB_TEST_SCRIPTS) + "/../..";
  TempDir d;
  const auto r = run_cli("--quiet run " + src + "/suites/quick.toml -o " + (d / "quick"));
  INFO(r.err);
  REQUIRE((r.exit_code == 0 || r.exit_code == 1));
  const Json fresh = regression_record(read_json(d / "quick/results.json"));
  const Json ref = read_json(src + "/results/reference/quick/results.json");
  report::CompareOptions o;
  o.metrics = {"jaccard", "porosity_bias_pp", "hits", "false_calls_per_cm3"};
  o.tolerance = {{"jaccard", 0.002}, {"porosity_bias_pp", 0.01}, {"hits", 0}, {"false_calls_per_cm3", 1e-6}};
  const auto cmp = report::compare_runs(ref, fresh, o);
  INFO(report::compare_markdown(cmp, "reference", "fresh", o));
  CHECK(cmp.unmatched.empty());
  CHECK_FALSE(cmp.any_regression);
  CHECK(cmp.rows.size() == ref["selections"].size() * o.metrics.size());
  CHECK(fresh["selections"].dump() == ref["selections"].dump());
}

TEST_CASE("an unknown command is named, with the closest one", "[suite][cli]") {
  const auto r = run_cli("frobnicate");
  CHECK(r.exit_code == 2);
  CHECK_THAT(r.err, Catch::Contains("unknown command 'frobnicate'"));
  const auto t = run_cli("--threads 2 reprot x");
  CHECK(t.exit_code == 2);
  CHECK_THAT(t.err, Catch::Contains("did you mean 'report'"));
  CHECK(run_cli("--threads 2 --quiet methods").exit_code == 0);  // a known command after global options
}

TEST_CASE("every built-in suite parses", "[suite]") {
  const fs::path dir = fs::path(PB_TEST_SCRIPTS) / "../../suites";
  int n = 0;
  for (auto& e : fs::directory_iterator(dir)) {
    if (e.path().extension() != ".toml") continue;
    INFO(e.path());
    const Suite s = load_suite(e.path().string());
    CHECK_FALSE(s.datasets.empty());
    CHECK_FALSE(s.methods.empty());
    ++n;
  }
  CHECK(n >= 5);  // quick, sparse-view, dose, model-regression, example
}

TEST_CASE("shards run apart into one folder and merge into the whole run", "[suite][run]") {
  TempDir d;
  write_file(d / "tiny.toml", tiny_suite(0.0));
  REQUIRE(run_cli("--quiet run " + (d / "tiny.toml") + " -o " + (d / "whole")).exit_code == 0);
  auto s1 = run_cli("run " + (d / "tiny.toml") + " -o " + (d / "sharded") + " --shard 1/2");
  CHECK(s1.exit_code == 0);
  // Synthesis inside a run shows the steps `synth` shows (issue 10).
  CHECK_THAT(s1.err, Catch::Contains("synthesising dataset 'blank'"));
  CHECK_THAT(s1.err, Catch::Contains("synth 'blank': "));
  CHECK_THAT(s1.out, Catch::Contains("not all cells are present yet"));
  CHECK_FALSE(fs::exists(d.path / "sharded/results.json"));
  CHECK(run_cli("--quiet run " + (d / "tiny.toml") + " -o " + (d / "sharded") + " --shard 2/2 --resume").exit_code == 0);
  REQUIRE(fs::exists(d.path / "sharded/results.json"));
  CHECK(regression_record(read_json(d / "whole/results.json"))["cells"].dump() ==
        regression_record(read_json(d / "sharded/results.json"))["cells"].dump());
  CHECK(run_cli("--quiet run " + (d / "tiny.toml") + " -o " + (d / "x") + " --shard 3/2").exit_code == 2);
  // Resuming a folder whose cells are all present sets up no dataset again: no mask is read, no
  // montage background rewritten (issue 10); the reports are written again from the cells.
  const fs::path bg = d.path / "sharded/data/blank/montage-reference.png";
  REQUIRE(fs::exists(bg));
  const auto stamp = fs::last_write_time(bg);
  const std::string before = regression_record(read_json(d / "sharded/results.json"))["cells"].dump();
  auto again = run_cli("--quiet run " + (d / "tiny.toml") + " -o " + (d / "sharded") + " --resume");
  INFO(again.out << again.err);
  CHECK(again.exit_code == 0);
  CHECK_THAT(again.out, Catch::Contains("0 cells run, 15 already done"));
  CHECK_THAT(again.out, Catch::Contains("0 of 1 datasets prepared"));
  CHECK(fs::last_write_time(bg) == stamp);
  CHECK(regression_record(read_json(d / "sharded/results.json"))["cells"].dump() == before);
}

TEST_CASE("a run record with missing or mistyped fields is refused before any report is written", "[suite][harden]") {
  // Found by fuzz_results: the reports read suite.json's top-level fields without checks, so a
  // record edited by hand (or from another tool) was undefined behaviour instead of exit 2.
  TempDir d;
  const fs::path run = d.path / "run";
  fs::create_directories(run / "cells");
  auto write_record = [&](const std::string& text) { std::ofstream(run / "suite.json") << text; };
  write_record(R"({"suite_sha256": "abc", "criteria": [], "cells": [], "selections": []})");
  auto r = run_cli("report " + run.string());
  CHECK(r.exit_code == 2);
  CHECK_THAT(r.err, Catch::Contains("suite.json") && Catch::Contains("field 'suite'") && Catch::Contains("missing"));
  write_record(R"({"suite": {"name": 3, "description": "", "path": "q.toml"}, "suite_sha256": "abc"})");
  r = run_cli("report " + run.string());
  CHECK(r.exit_code == 2);
  CHECK_THAT(r.err, Catch::Contains("field 'suite.name'") && Catch::Contains("a string"));
  write_record(R"({"suite": {"name": "q", "description": "", "path": "q.toml"}, "suite_sha256": "abc",
                   "calibration": {"objective": "jaccard"}, "scoring": {}, "criteria": {}, "methods": [], "datasets": []})");
  r = run_cli("report " + run.string());
  CHECK(r.exit_code == 2);
  CHECK_THAT(r.err, Catch::Contains("field 'criteria'") && Catch::Contains("an array") && Catch::Contains("wrong type"));
  CHECK_FALSE(fs::exists(run / "results.json"));
  CHECK_FALSE(fs::exists(run / "report.html"));
}

TEST_CASE("a shard SIGKILLed and resubmitted gives the results of a single-process run", "[suite][run][slurm]") {
  // What a cluster does when a job-array task is killed (node failure, time limit) and resubmitted:
  // the same `run --shard K/N --resume` again. Reference: the single-process run of the suite.
  TempDir d;
  write_file(d / "tiny.toml", tiny_suite(0.0));
  REQUIRE(run_cli("--quiet run " + (d / "tiny.toml") + " -o " + (d / "whole")).exit_code == 0);
  const std::string sharded = "--quiet run " + (d / "tiny.toml") + " -o " + (d / "sharded");
  REQUIRE(run_cli(sharded + " --shard 2/2").exit_code == 0);
  int shard2 = 0;
  for (auto& e : fs::directory_iterator(d.path / "sharded/cells")) shard2 += e.path().extension() == ".json";
  REQUIRE(shard2 > 0);
  REQUIRE(shard2 < 15);
  // Shard 1/2 killed after two of its cells: interrupted, with some of its work on disk.
  const int before = kill_after_cells(sharded + " --shard 1/2 --resume", d.path / "sharded", shard2 + 2);
  INFO("cells before the kill: " << before << " (shard 2/2 wrote " << shard2 << ")");
  REQUIRE(before >= shard2 + 2);
  REQUIRE(before < 15);
  CHECK_FALSE(fs::exists(d.path / "sharded/results.json"));
  // Resubmitted: it finds its cells done, runs the rest, and (the last shard) writes the reports.
  const auto r = run_cli(sharded + " --shard 1/2 --resume");
  INFO(r.out << r.err);
  REQUIRE(r.exit_code == 0);
  REQUIRE(fs::exists(d.path / "sharded/results.json"));
  check_same_run(d.path / "whole", d.path / "sharded");
}
