#pragma once
// The one reader of the whole of a small file porebench takes as text: suite and recipe files,
// model cards, run records (suite.json, cells, results.json) and prediction sidecars. Not for
// /proc or cgroup files: their size reads 0 (core/parallel.cpp reads those its own way).
#include <cstdint>
#include <string>

namespace pb {

// Files of settings (suites, recipes, model cards, sidecars) are a few kB; 16 MiB is far beyond any.
inline constexpr uint64_t kMaxSettingsFileBytes = uint64_t(16) << 20;
// Run records grow with the cells (the quick suite's results.json is 0.4 MB); 1 GiB is far beyond.
inline constexpr uint64_t kMaxRecordFileBytes = uint64_t(1) << 30;

// The file's bytes. Refused as InputError naming "<what> <path>": a missing path, a folder or
// another non-regular file, an unreadable file, a file larger than max_bytes (checked before any
// allocation) and a read that ends early (the file shrank or the device failed): never half a file.
std::string read_text_file(const std::string& path, const std::string& what, uint64_t max_bytes = kMaxSettingsFileBytes);

}  // namespace pb
