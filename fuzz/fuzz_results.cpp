// libFuzzer target: the results.json loader and what reads it (criteria, cell selection, the
// regression record, CSV and summary rendering), read as porebench reads a results.json: the
// top-level shape checked first (suite::check_run_record), the rest under reading_records
// (core/json.hpp), which turns a missing or mistyped field into InputError. InputError is the
// answer to bad input (exit 2); anything else that escapes, and any crash, is a finding.
#include <cstddef>
#include <cstdint>
#include <string>

#include "core/error.hpp"
#include "core/json.hpp"
#include "report/report.hpp"
#include "suites/preflight.hpp"
#include "suites/results.hpp"

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  using Json = nlohmann::ordered_json;
  Json j = Json::parse(data, data + size, nullptr, false);
  if (j.is_discarded() || !j.is_object()) return 0;
  try {
    pb::suite::check_run_record(j, "results.json");
    pb::reading_records("results.json", [&] {
      const auto criteria = pb::suite::criteria_from_json(j.value("criteria", Json::array()));
      std::vector<Json> cells;
      if (j.contains("cells") && j["cells"].is_array())
        for (const auto& c : j["cells"]) cells.push_back(c);
      const auto objective = j.contains("calibration") && j["calibration"].is_object()
                                 ? j["calibration"].value("objective", std::string("jaccard"))
                                 : std::string("jaccard");
      (void)pb::suite::select_cells(cells, objective, criteria);
      (void)pb::suite::regression_record(j);
      (void)pb::report::results_csv(j);
      (void)pb::report::summary_md(j);
    });
  } catch (const pb::InputError&) {
  }
  return 0;
}
