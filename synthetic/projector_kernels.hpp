#pragma once
// Kernels of Joseph's projector (projector.cpp): one image line into a row of detector bins.
// Internal to synthetic/.
namespace pb::synth::kernels {

// row[k] += w * L(f0 + k df) for k in [k0, k1], L a line of the image padded with one zero each
// side (index = f + 1), linear interpolation. Portable, with an AVX2 clone picked at run time.
void joseph_line(const float* line, float f0, float df, int k0, int k1, float w, float* row);

#if defined(__x86_64__) && defined(__GNUC__)
constexpr bool kJosephAvx512Built = true;
constexpr double kJosephMaxDf = 1.9;  // 15 x 1.9 + 3 < 32: the 16 bins of a register read one window
constexpr int kJosephSlack = 64;      // floats before and after the padded lines (window reads)
// The same without gathers (AVX-512): 16 bins at a time read a window of 32 floats of the line and
// of its differences dline[i] = line[i+1] - line[i], picked by two-source permutes (as the
// back-projection kernels do). |df| <= kJosephMaxDf; the lines need kJosephSlack floats around them.
void joseph_line_avx512(const float* line, const float* dline, double f0, double df, int k0, int k1, float w,
                        float* row);
#else
constexpr bool kJosephAvx512Built = false;
constexpr double kJosephMaxDf = 0;
constexpr int kJosephSlack = 0;
inline void joseph_line_avx512(const float*, const float*, double, double, int, int, float, float*) {}
#endif

}  // namespace pb::synth::kernels
