// libFuzzer target: our MetaImage / NRRD / NIfTI-1 header and size check (core/io_header.hpp) on
// a whole file held in memory. The first byte picks the format. Bad input must end in InputError:
// no crash, no hang, no allocation beyond the memory budget (set to 64 MiB here).
#include <cstddef>
#include <cstdint>
#include <string_view>

#include "core/error.hpp"
#include "core/io_header.hpp"
#include "core/memory.hpp"

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  if (size < 1) return 0;
  pb::set_memory_budget_bytes(uint64_t(64) << 20);
  static const char* names[] = {"f.mha", "f.nrrd", "f.nii", "f.mhd"};
  const std::string_view file(reinterpret_cast<const char*>(data) + 1, size - 1);
  try {
    pb::check_volume_bytes(file, names[data[0] % 4]);
  } catch (const pb::InputError&) {
  }
  return 0;
}
