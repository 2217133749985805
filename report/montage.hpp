#pragma once
// Slice montages for report.html: the grey scan slice, the reference pore mask, then each method's
// pores over the grey scan slice in the "porebench overlay" colour scheme, tiles labelled.
// The three overlay colours come from the colour-blind-safe palette of Okabe & Ito (2008),
// "Color Universal Design": sky blue, vermillion and yellow stay apart under protan, deutan and
// tritan vision and against grey.
#include <opencv2/core.hpp>
#include <string>
#include <vector>

namespace pb::report {

struct OverlayColour {
  const char* role;  // what the colour marks
  const char* hex;   // "#56B4E9", for the HTML legend
  unsigned char b, g, r;
};
inline constexpr OverlayColour kOverlayFound{"pore found (in reference and prediction)", "#56B4E9", 233, 180, 86};
inline constexpr OverlayColour kOverlayExtra{"extra (false positive: predicted, not in reference)", "#D55E00", 0, 94, 213};
inline constexpr OverlayColour kOverlayMissed{"missed (false negative: in reference, not predicted)", "#F0E442", 66, 228, 240};
inline constexpr const char* kOverlaySchemeName = "porebench overlay";

// One method tile: the label and the 0/255 PNG of its pore mask at the montage slice (empty path:
// the cell failed; `note` says why, shown on the tile).
struct MontageTile {
  std::string label, mask_png, note;
};

// Colour overlay of pred against ref over a grey slice (all CV_8UC1 of one size; masks non-zero =
// pore): BGR CV_8UC3, found / extra / missed in the overlay colours, elsewhere the grey value
// dimmed to kOverlayDim (rounded) so that the light colours stand out on bright material.
inline constexpr double kOverlayDim = 0.6;
cv::Mat overlay_slice(const cv::Mat& grey, const cv::Mat& ref, const cv::Mat& pred);

// Reads the PNGs (paths absolute or relative to the working folder) and writes the montage PNG
// atomically. InputError naming the file when the scan or reference PNG is missing or the sizes
// differ; an unreadable method mask becomes a tile that says so.
// `pixel_um` (the slice's pixel size in µm; not finite or <= 0: unknown) adds a scale bar to the
// scan tile: the longest 1-2-5 length in µm not above a quarter of the tile, labelled "N um".
void write_montage(const std::string& scan_png, const std::string& reference_png, const std::string& scan_label,
                   const std::vector<MontageTile>& methods, const std::string& out_png, double pixel_um = 0);

// The scale bar's length: the longest 1, 2 or 5 x 10^k µm not above `max_um` (0 when max_um <= 0).
double scale_bar_um(double max_um);

}  // namespace pb::report
