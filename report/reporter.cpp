// The reporters of a run and the assembly of its results record (see reporter.hpp).
#include "report/reporter.hpp"

#include <algorithm>
#include <filesystem>

#include "core/context.hpp"
#include "core/error.hpp"
#include "core/io.hpp"
#include "core/json.hpp"
#include "report/html.hpp"
#include "suites/preflight.hpp"
#include "suites/layout.hpp"
#include "suites/results.hpp"

namespace fs = std::filesystem;

namespace pb::report {

namespace {

// A reporter that renders one text file.
class TextReporter : public Reporter {
 public:
  TextReporter(std::string file, std::string (*render)(const Json&)) : file_(std::move(file)), render_(render) {}
  std::vector<std::string> files() const override { return {file_}; }
  void write(const Json& results, const std::string& out_dir) const override {
    write_text_atomic((fs::path(out_dir) / file_).string(), render_(results));
  }

 private:
  std::string file_;
  std::string (*render_)(const Json&);
};

std::string results_json(const Json& results) { return results.dump(1) + "\n"; }

class HtmlReporter : public Reporter {
 public:
  std::vector<std::string> files() const override { return {"report.html", "montages/"}; }
  void write(const Json& results, const std::string& out_dir) const override { write_html_and_montages(results, out_dir); }
};

}  // namespace

const std::vector<std::unique_ptr<Reporter>>& standard_reporters() {
  static const std::vector<std::unique_ptr<Reporter>> r = [] {
    std::vector<std::unique_ptr<Reporter>> v;
    v.push_back(std::make_unique<TextReporter>("results.json", results_json));
    v.push_back(std::make_unique<TextReporter>("results.csv", results_csv));
    v.push_back(std::make_unique<TextReporter>("summary.md", summary_md));
    v.push_back(std::make_unique<TextReporter>("validation-record.md", validation_record_md));
    v.push_back(std::make_unique<HtmlReporter>());
    return v;
  }();
  return r;
}

std::string report_files_text() {
  std::string out;
  for (const auto& r : standard_reporters())
    for (const auto& f : r->files()) out += (out.empty() ? "" : ", ") + f;
  return out;
}

Json assemble_results(const std::string& out_dir) {
  const fs::path dir(out_dir);
  // Checked (harden, suites/preflight): cells/ present, each cell parses, none of another run.
  const Json rec = suite::load_suite_record(out_dir);
  remove_stale_partials(out_dir);  // temporaries of a killed run or report
  std::vector<Json> cells = suite::load_checked_cells(out_dir, rec.value("suite_sha256", ""));
  for (auto& c : cells) c.erase("suite_sha256");  // results.json carries it once, at the top
  std::sort(cells.begin(), cells.end(), [](const Json& a, const Json& b) { return a["index"] < b["index"]; });
  const auto criteria = suite::criteria_from_json(rec["criteria"]);
  const auto sel = suite::select_cells(cells, rec["calibration"]["objective"], criteria);
  Json results;
  results["context"] = run_context();
  for (auto it = rec.begin(); it != rec.end(); ++it) results[it.key()] = it.value();
  Json js = Json::array();
  bool all_passed = true;
  for (const auto& s : sel) {
    Json verdicts = Json::array();
    for (const auto& [text, ok] : s.verdicts) verdicts.push_back({{"criterion", text}, {"passed", ok}});
    js.push_back({{"dataset", s.dataset}, {"scan", s.scan}, {"method", s.method}, {"projections", s.projections},
                  {"i0", s.i0}, {"tuned", s.tuned}, {"chosen_cell", cells[s.chosen]["id"]},
                  {"chosen_params", cells[s.chosen]["params"]}, {"failed", s.failed}, {"verdicts", verdicts},
                  {"passed", s.passed}});
    all_passed = all_passed && s.passed;
  }
  results["selections"] = js;
  results["advice"] = scan_recipe_advice(results);
  results["criteria_met"] = all_passed;
  results["decision"] = nullptr;  // its place in the record, before the cells it reads
  results["cells"] = cells;
  results["decision"] = decide(results);
  return results;
}

Json write_results(const std::string& out_dir) {
  // The cells and suite.json are files a user may have edited: a field they lack is named, not
  // undefined behaviour in a renderer (core/json.hpp). The cells are checked only for their shape
  // (suites/preflight), so the renderers, which read deeper fields, are inside the wrap too.
  return reading_records("run folder " + out_dir + " (suite.json, cells/)", [&] {
    const Json results = assemble_results(out_dir);
    // results.json is the mark of a complete pass: an earlier one goes first and the new one is
    // written last, so a pass killed or failed midway leaves no results.json beside missing or
    // stale files.
    const std::string record = (fs::path(out_dir) / "results.json").string();
    std::error_code ec;
    fs::remove(record, ec);
    if (ec) throw InputError("cannot remove the earlier " + record + ": " + ec.message());
    const Reporter* last = nullptr;
    for (const auto& r : standard_reporters()) {
      if (r->files() == std::vector<std::string>{"results.json"}) {
        last = r.get();
        continue;
      }
      r->write(results, out_dir);
    }
    if (last) last->write(results, out_dir);
    return results;
  });
}

}  // namespace pb::report
