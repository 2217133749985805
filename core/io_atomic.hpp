#pragma once
// Outputs that must appear together: write every temporary first, then commit them (see
// AtomicOutput in core/io.hpp). Implemented in core/io.cpp.
#include <string>

#include "core/io.hpp"

namespace pb {

// Writes `text` to out.tmp_path() without committing it. Throws InputError with the cause
// ("No space left on device").
void write_text_to(const AtomicOutput& out, const std::string& text);

}  // namespace pb
