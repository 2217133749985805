// Slice montages (see montage.hpp). Tiles are upscaled with nearest neighbour to at least
// kMinTile px (small phantoms) or reduced by area averaging to at most kMaxTile px; five per row.
#include "report/montage.hpp"

#include <algorithm>
#include <cmath>
#include <opencv2/imgcodecs.hpp>  // flags only; files go through core/image_files
#include <opencv2/imgproc.hpp>

#include "core/error.hpp"
#include "core/format.hpp"
#include "core/image_files.hpp"
#include "core/io.hpp"

namespace pb::report {

namespace {

constexpr int kMinTile = 160, kMaxTile = 384, kPerRow = 5, kGap = 6, kLabelH = 24;

cv::Mat read_grey(const std::string& path, const std::string& what) {
  cv::Mat m = image_read(path, cv::IMREAD_GRAYSCALE);
  if (m.empty()) throw InputError("montage: cannot read the " + what + " slice " + path);
  return m;
}

cv::Mat scaled(const cv::Mat& tile) {
  const int n = std::max(tile.cols, tile.rows);
  cv::Mat out;
  if (n < kMinTile) {
    const int k = (kMinTile + n - 1) / n;
    cv::resize(tile, out, cv::Size(tile.cols * k, tile.rows * k), 0, 0, cv::INTER_NEAREST);
  } else if (n > kMaxTile) {
    const double f = double(kMaxTile) / n;
    cv::resize(tile, out, cv::Size(std::max(1, int(tile.cols * f)), std::max(1, int(tile.rows * f))), 0, 0, cv::INTER_AREA);
  } else {
    out = tile;
  }
  return out;
}

// A label strip above the tile; long labels are shrunk, then cut with "..".
cv::Mat labelled(const cv::Mat& tile, std::string label) {
  cv::Mat out(tile.rows + kLabelH, tile.cols, CV_8UC3, cv::Scalar(32, 32, 32));
  tile.copyTo(out(cv::Rect(0, kLabelH, tile.cols, tile.rows)));
  double scale = 0.48;
  int base = 0;
  cv::Size sz = cv::getTextSize(label, cv::FONT_HERSHEY_SIMPLEX, scale, 1, &base);
  while (sz.width > tile.cols - 8 && scale > 0.34) sz = cv::getTextSize(label, cv::FONT_HERSHEY_SIMPLEX, scale -= 0.02, 1, &base);
  while (sz.width > tile.cols - 8 && label.size() > 3) {
    label = label.substr(0, label.size() - 3) + "..";
    sz = cv::getTextSize(label, cv::FONT_HERSHEY_SIMPLEX, scale, 1, &base);
  }
  cv::putText(out, label, cv::Point(4, kLabelH - 8), cv::FONT_HERSHEY_SIMPLEX, scale, cv::Scalar(255, 255, 255), 1, cv::LINE_AA);
  return out;
}

cv::Mat note_tile(const cv::Size& size, const std::string& note) {
  cv::Mat t(size, CV_8UC3, cv::Scalar(90, 90, 90));
  cv::putText(t, note.substr(0, 28), cv::Point(6, size.height / 2), cv::FONT_HERSHEY_SIMPLEX, 0.42, cv::Scalar(255, 255, 255), 1,
              cv::LINE_AA);
  return t;
}

}  // namespace

cv::Mat overlay_slice(const cv::Mat& grey, const cv::Mat& ref, const cv::Mat& pred) {
  CV_Assert(grey.type() == CV_8UC1 && ref.type() == CV_8UC1 && pred.type() == CV_8UC1);
  CV_Assert(grey.size() == ref.size() && grey.size() == pred.size());
  cv::Mat dim, out;
  grey.convertTo(dim, CV_8U, kOverlayDim);
  cv::cvtColor(dim, out, cv::COLOR_GRAY2BGR);
  for (int y = 0; y < grey.rows; ++y) {
    const uint8_t* r = ref.ptr<uint8_t>(y);
    const uint8_t* p = pred.ptr<uint8_t>(y);
    cv::Vec3b* o = out.ptr<cv::Vec3b>(y);
    for (int x = 0; x < grey.cols; ++x) {
      const OverlayColour* c = r[x] && p[x] ? &kOverlayFound : p[x] ? &kOverlayExtra : r[x] ? &kOverlayMissed : nullptr;
      if (c) o[x] = cv::Vec3b(c->b, c->g, c->r);
    }
  }
  return out;
}

double scale_bar_um(double max_um) {
  if (!(max_um > 0) || !std::isfinite(max_um)) return 0;
  const double p = std::pow(10.0, std::floor(std::log10(max_um)));
  for (double k : {5.0, 2.0, 1.0})
    if (k * p <= max_um * (1 + 1e-12)) return k * p;
  return p;
}

namespace {

// A white bar with a dark outline at the bottom left of a tile, its length in µm written above.
void draw_scale_bar(cv::Mat& tile, double tile_px_per_um, double bar_um) {
  const int len = int(std::lround(bar_um * tile_px_per_um));
  if (len < 4 || len > tile.cols - 8) return;
  const int x0 = 6, y1 = tile.rows - 8, y0 = y1 - 4;
  cv::rectangle(tile, cv::Point(x0 - 1, y0 - 1), cv::Point(x0 + len, y1 + 1), cv::Scalar(0, 0, 0), cv::FILLED);
  cv::rectangle(tile, cv::Point(x0, y0), cv::Point(x0 + len - 1, y1), cv::Scalar(255, 255, 255), cv::FILLED);
  const std::string text = format_number(bar_um, 3) + " um";  // the Hershey fonts have no µ
  cv::putText(tile, text, cv::Point(x0, y0 - 5), cv::FONT_HERSHEY_SIMPLEX, 0.4, cv::Scalar(0, 0, 0), 3, cv::LINE_AA);
  cv::putText(tile, text, cv::Point(x0, y0 - 5), cv::FONT_HERSHEY_SIMPLEX, 0.4, cv::Scalar(255, 255, 255), 1, cv::LINE_AA);
}

}  // namespace

void write_montage(const std::string& scan_png, const std::string& reference_png, const std::string& scan_label,
                   const std::vector<MontageTile>& methods, const std::string& out_png, double pixel_um) {
  const cv::Mat grey = read_grey(scan_png, "scan");
  const cv::Mat ref = read_grey(reference_png, "reference");
  if (ref.size() != grey.size())
    throw InputError("montage: reference slice " + reference_png + " is " + std::to_string(ref.cols) + "x" +
                     std::to_string(ref.rows) + ", the scan slice " + scan_png + " " + std::to_string(grey.cols) + "x" +
                     std::to_string(grey.rows));
  std::vector<cv::Mat> tiles;
  cv::Mat g3, r3;
  cv::cvtColor(grey, g3, cv::COLOR_GRAY2BGR);
  cv::Mat scan_tile = scaled(g3);
  if (pixel_um > 0 && std::isfinite(pixel_um)) {
    const double px_per_um = double(scan_tile.cols) / (double(grey.cols) * pixel_um);
    draw_scale_bar(scan_tile, px_per_um, scale_bar_um(double(grey.cols) * pixel_um / 4));
  }
  tiles.push_back(labelled(scan_tile, scan_label));
  cv::cvtColor(ref, r3, cv::COLOR_GRAY2BGR);
  cv::threshold(r3, r3, 0, 255, cv::THRESH_BINARY);
  tiles.push_back(labelled(scaled(r3), "reference pores (white)"));
  const cv::Size tile_size = scaled(g3).size();
  for (const auto& m : methods) {
    cv::Mat pred;
    std::string note = m.note;
    if (!m.mask_png.empty()) {
      pred = image_read(m.mask_png, cv::IMREAD_GRAYSCALE);
      if (pred.empty()) note = "mask file missing";
      else if (pred.size() != grey.size()) note = "mask size differs", pred.release();
    }
    if (pred.empty()) tiles.push_back(labelled(note_tile(tile_size, note.empty() ? "no mask" : note), m.label));
    else tiles.push_back(labelled(scaled(overlay_slice(grey, ref, pred)), m.label));
  }
  const int cols = std::min<int>(kPerRow, int(tiles.size()));
  const int rows = (int(tiles.size()) + cols - 1) / cols;
  const int tw = tiles[0].cols, th = tiles[0].rows;
  cv::Mat sheet(rows * th + (rows + 1) * kGap, cols * tw + (cols + 1) * kGap, CV_8UC3, cv::Scalar(255, 255, 255));
  for (size_t i = 0; i < tiles.size(); ++i) {
    const int r = int(i) / cols, c = int(i) % cols;
    tiles[i].copyTo(sheet(cv::Rect(kGap + c * (tw + kGap), kGap + r * (th + kGap), tw, th)));
  }
  AtomicOutput a(out_png);
  // Highest zlib level: upscaled tiles repeat each pixel and shrink tenfold (quick suite: 500 -> 55 kB).
  if (!image_write(a.tmp_path(), sheet, {cv::IMWRITE_PNG_COMPRESSION, 9})) throw InputError("montage: cannot write " + out_png);
  a.commit();
}

}  // namespace pb::report
