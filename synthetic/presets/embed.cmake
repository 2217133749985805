# Writes OUT, a C++ source holding every preset file as a raw string (synthetic/presets.hpp), so
# that `porebench synth --preset NAME` works from any folder with nothing installed beside the
# binary. FILES: the preset files, separated by '|'. Run by CMakeLists.txt at build time whenever
# a preset file changes; the source is rewritten only when its text changes.
string(REPLACE "|" ";" FILES "${FILES}")
set(body "")
foreach(f IN LISTS FILES)
  get_filename_component(name "${f}" NAME_WLE)
  file(READ "${f}" text)
  string(FIND "${text}" ")pb_preset" clash)
  if(NOT clash EQUAL -1)
    message(FATAL_ERROR "${f}: holds ')pb_preset', which would end the raw string it is embedded in")
  endif()
  string(APPEND body "      {\"${name}\", R\"pb_preset(${text})pb_preset\"},\n")
endforeach()
file(WRITE "${OUT}.tmp"
"// Generated from synthetic/presets/*.toml by synthetic/presets/embed.cmake: do not edit.
#include \"synthetic/presets.hpp\"

namespace pb::synth {

const std::vector<EmbeddedPreset>& embedded_presets() {
  static const std::vector<EmbeddedPreset> all{
${body}  };
  return all;
}

}  // namespace pb::synth
")
execute_process(COMMAND ${CMAKE_COMMAND} -E copy_if_different "${OUT}.tmp" "${OUT}")
file(REMOVE "${OUT}.tmp")
