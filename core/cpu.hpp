#pragma once
// Instruction sets for hand-written kernels, detected once at run time (builds stay portable: no
// -march=native). Kernels with an AVX2 or AVX-512 path keep a generic path that agrees with them to
// float rounding (integer kernels: identical), so bit-identical files across machines need the same
// level (README, `--simd`); tests cap the level to run both (set_simd_cap).
namespace pb {

enum class Simd { generic = 0, avx2 = 1, avx512 = 2 };

Simd simd_level();         // what this CPU supports, at most the cap
void set_simd_cap(Simd s);  // default: no cap
const char* simd_name(Simd s);

}  // namespace pb
