#pragma once
// The built-in recipes: every file synthetic/presets/NAME.toml, embedded into the library at build
// time (synthetic/presets/embed.cmake), so presets need no files beside the installed binary and
// work from any working folder. recipe.hpp's preset() and preset_names() read them.
#include <vector>

namespace pb::synth {

struct EmbeddedPreset {
  const char* name;  // the file name without .toml
  const char* toml;  // the file's text
};

// In file-name order (the build globs and sorts synthetic/presets/*.toml).
const std::vector<EmbeddedPreset>& embedded_presets();

}  // namespace pb::synth
