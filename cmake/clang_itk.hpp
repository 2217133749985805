// Force-included (clang -include) into the translation units that see ITK, in clang builds
// (fuzz/ci.sh; CMakeLists.txt PB_ITK_CLANG_SHIM). Debian's ITK 5.2 generated its
// itk_compiler_detection.h for GCC only: under clang it stops with "Unsupported compiler". This
// includes that header once with clang presented as the GCC it is compatible with (GCC 12's C++17
// feature set, which clang 14 has), then restores the compiler's own macros; ITK's own include of
// it is then a no-op (its include guard).
#if defined(__clang__) && __has_include(<itk_compiler_detection.h>)
#pragma push_macro("__clang__")
#pragma push_macro("__GNUC__")
#pragma push_macro("__GNUC_MINOR__")
#undef __clang__
#undef __GNUC__
#undef __GNUC_MINOR__
#define __GNUC__ 12
#define __GNUC_MINOR__ 2
#include <itk_compiler_detection.h>
#pragma pop_macro("__GNUC_MINOR__")
#pragma pop_macro("__GNUC__")
#pragma pop_macro("__clang__")
#endif
