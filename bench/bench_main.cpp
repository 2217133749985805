// Benchmark entry point: Google Benchmark's main, with porebench's run context (version, git hash,
// dependency versions, threads, SIMD level; core/context.hpp) added to the context block of every
// report, so that a benchmark JSON says which build and settings produced it.
#include <benchmark/benchmark.h>

#include <string>

#include "core/context.hpp"

int main(int argc, char** argv) {
  benchmark::Initialize(&argc, argv);
  if (benchmark::ReportUnrecognizedArguments(argc, argv)) return 1;
  const auto context = pb::run_context();
  for (const auto& [key, value] : context.items()) {
    if (key == "dependencies") {
      for (const auto& [dep, version] : value.items()) benchmark::AddCustomContext("porebench_dep_" + dep, version.get<std::string>());
    } else {
      benchmark::AddCustomContext("porebench_" + key, value.is_string() ? value.get<std::string>() : value.dump());
    }
  }
  benchmark::RunSpecifiedBenchmarks();
  benchmark::Shutdown();
  return 0;
}
