// porebench run SUITE -o DIR: a declared trial of methods on datasets; porebench report DIR:
// re-render the results and documents from the cells in DIR.
#include <unistd.h>

#include <fstream>
#include <iostream>
#include <memory>

#include "apps/cli.hpp"
#include "core/error.hpp"
#include "report/reporter.hpp"
#include "suites/preflight.hpp"
#include "suites/results.hpp"
#include "suites/runner.hpp"

namespace pb::cli {
namespace {

Action setup_run(CLI::App& app) {
  app.description("run a suite: every method on every dataset, scored, with reports and a validation record");
  struct Args {
    std::string suite, out;
    bool resume = false, check = false;
    std::string shard;
  };
  auto a = std::make_shared<Args>();
  app.add_option("SUITE", a->suite, "suite file (TOML), e.g. suites/quick.toml")->required();
  app.add_option("-o,--output", a->out, "output folder, e.g. results/quick")->required();
  app.add_flag("--resume", a->resume, "skip cells already finished in the output folder");
  app.add_option("--shard", a->shard, "run only shard K of N (K/N, 1-based), e.g. one per cluster job");
  app.add_flag("--check", a->check, "check the suite (every value, file and scan) and exit: 0 if it would run, 2 if not");
  return [a] {
    suite::RunOptions o;
    o.out_dir = a->out;
    o.resume = a->resume;
    o.quiet = globals().quiet;
    o.progress_bar = ::isatty(2);
    o.log = [](const std::string& m) { cli::log("porebench: " + m); };
    if (!a->shard.empty()) {
      int k = 0, n = 0;
      char extra = 0;
      if (std::sscanf(a->shard.c_str(), "%d/%d%c", &k, &n, &extra) != 2 || n < 1 || k < 1 || k > n)
        throw InputError("--shard must be K/N with 1 <= K <= N, got '" + a->shard + "'");
      o.shard_index = k - 1;
      o.shard_count = n;
    }
    const suite::Suite s = suite::load_suite_checked(a->suite);
    if (a->check) {
      suite::preflight(s);
      std::cout << "suite " << a->suite << " checked: " << s.datasets.size() << " datasets, " << s.methods.size()
                << " methods; nothing run\n";
      return 0;
    }
    // One run per folder; declared shards of one run share it (core/io.hpp FolderLock).
    FolderLock lock(a->out, "run " + a->suite + (a->shard.empty() ? "" : " --shard " + a->shard), o.shard_index, o.shard_count);
    const suite::RunSummary r = suite::run_suite(s, o);
    std::cout << "porebench run: " << r.cells_run << " cells run, " << r.cells_skipped << " already done, " << r.cells_failed
              << " failed, of " << r.cells_total << " (" << r.datasets_prepared << " of " << s.datasets.size()
              << " datasets prepared)\n";
    if (!r.complete) {
      std::cout << "not all cells are present yet: after every shard, run again with --resume to write the reports\n";
      return 0;
    }
    if (!lock.try_exclusive()) {
      std::cout << "every cell is present, but another shard still holds " << a->out
                << ": the reports are written by the last shard to end, or by `porebench run " << a->suite << " -o " << a->out
                << " --resume` after all shards\n";
      return 0;
    }
    const bool met = report::write_results(a->out)["criteria_met"].get<bool>();
    std::cout << "wrote " << a->out << "/: " << report::report_files_text() << '\n'
              << (met ? "every acceptance criterion is met\n" : "at least one acceptance criterion is NOT met\n");
    return met ? 0 : 1;
  };
}

Action setup_report(CLI::App& app) {
  // Exit 0 once rendered, whatever the verdict: `report` renders; judging is `run`'s exit code (1
  // when a criterion is not met) and `compare`'s. A re-render in a script or a CI step that only
  // refreshes the documents must not read as failed; the verdict is printed.
  app.description("re-render results and documents of a finished run folder (exit 0 once rendered; the verdict is printed)");
  struct Args {
    std::string dir, record;
  };
  auto a = std::make_shared<Args>();
  app.add_option("DIR", a->dir, "run folder")->required();
  app.add_option("--reference-record", a->record,
                 "also write the machine-independent record of the run (the committed regression reference)");
  return [a] {
    if (!a->record.empty()) check_writable(a->record);
    suite::load_suite_record(a->dir);  // a missing folder or record is named before the lock
    const FolderLock lock(a->dir, "report " + a->dir);
    const auto results = report::write_results(a->dir);
    const bool ok = results["criteria_met"].get<bool>();
    std::cout << "wrote " << a->dir << "/: " << report::report_files_text() << '\n';
    if (!a->record.empty()) {
      // From the record just written, not read back from results.json.
      const auto record =
          reading_records("run folder " + a->dir + " (cells/)", [&] { return suite::regression_record(results); });
      write_text_atomic(a->record, record.dump(1) + "\n");
      std::cout << "wrote " << a->record << '\n';
    }
    std::cout << (ok ? "every acceptance criterion is met\n" : "at least one acceptance criterion is NOT met\n");
    return 0;
  };
}

}  // namespace

PB_REGISTER_COMMAND("run", 5, setup_run);
PB_REGISTER_COMMAND("report", 6, setup_report);

}  // namespace pb::cli
