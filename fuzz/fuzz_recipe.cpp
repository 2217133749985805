// libFuzzer target: the synthetic recipe reader (synthetic/recipe.hpp parse_recipe + validate),
// including the memory-budget checks of the sizes it declares. Bad input must end in InputError.
#include <cstddef>
#include <cstdint>
#include <string>

#include "core/error.hpp"
#include "core/memory.hpp"
#include "synthetic/recipe.hpp"

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  pb::set_memory_budget_bytes(uint64_t(64) << 20);
  const std::string text(reinterpret_cast<const char*>(data), size);
  try {
    const pb::synth::Recipe r = pb::synth::parse_recipe(text, "fuzz.toml");
    pb::synth::validate(r);
    (void)pb::synth::to_toml(r);
  } catch (const pb::InputError&) {
  }
  return 0;
}
