// porebench synth (--preset NAME | RECIPE.toml) (-o DIR | --print-recipe) [--set key=value]...: a
// porous phantom with exact truth and simulated CT scans of it at several projection counts (and
// doses).
#include <iostream>
#include <memory>

#include "apps/cli.hpp"
#include "core/error.hpp"
#include "synthetic/synth.hpp"

namespace pb::cli {
namespace {

Action setup_synth(CLI::App& app) {
  app.description("make a synthetic porous part with exact truth and simulated CT scans of it");
  struct Args {
    std::string recipe, preset, out;
    std::vector<std::string> sets;
    std::vector<int> projections;
    std::vector<double> i0;
    bool compress = false, print = false;
  };
  auto a = std::make_shared<Args>();
  app.add_option("RECIPE", a->recipe, "recipe TOML file (or use --preset)");
  std::string names;
  for (const std::string& n : synth::preset_names()) names += (names.empty() ? "" : ", ") + n;
  app.add_option("--preset", a->preset,
                 "built-in recipe (synthetic/presets/NAME.toml, built into the binary): " + names +
                     "; demo-small takes seconds");
  app.add_option("-o,--output", a->out, "output folder (not needed with --print-recipe)");
  app.add_option("--set", a->sets, "recipe override key=value, e.g. seed=3, scan.i0=1e4,4e4 (repeatable)");
  app.add_option("--projections", a->projections, "projection counts of the scans, e.g. 800,400,200")->delimiter(',');
  app.add_option("--i0", a->i0, "photons per detector bin and projection; several give a dose series")->delimiter(',');
  app.add_flag("--compress", a->compress, "compress the volumes");
  app.add_flag("--print-recipe", a->print, "print the full recipe and stop");
  return [a] {
    if (a->recipe.empty() == a->preset.empty()) throw InputError("synth: give either RECIPE.toml or --preset NAME (not both)");
    synth::Recipe r = a->preset.empty() ? synth::load_recipe(a->recipe) : synth::preset(a->preset);
    std::vector<std::string> sets = a->sets;
    auto join = [](const auto& v) {
      std::string s;
      for (const auto& x : v) s += (s.empty() ? "" : ",") + std::to_string(x);
      return s;
    };
    if (!a->projections.empty()) sets.push_back("scan.projections=[" + join(a->projections) + "]");
    if (!a->i0.empty()) sets.push_back("scan.i0=[" + join(a->i0) + "]");
    r = synth::apply_overrides(r, sets);
    if (a->print) {
      std::cout << synth::to_toml(r);
      return 0;
    }
    if (a->out.empty()) throw InputError("synth: give the output folder with -o DIR (or --print-recipe)");
    synth::WriteSynthOptions o;
    o.compress = a->compress;
    o.progress = [](const std::string& m) { log("synth: " + m); };
    const auto m = synth::write_synth(r, a->out, o);
    std::cout << "synth " << r.name << ": analytic porosity " << m["analytic_porosity_pct"].get<double>() << " %, "
              << m["files"].size() << " files in " << a->out << ", " << m["runtime_s"].get<double>() << " s\n";
    return 0;
  };
}

}  // namespace

PB_REGISTER_COMMAND("synth", 35, setup_synth);

}  // namespace pb::cli
