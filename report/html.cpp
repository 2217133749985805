// report.html (self-contained, inline SVG) and slice montages: the summary as a page until the
// plots land (issue 6, in progress).
#include <filesystem>

#include "core/io.hpp"
#include "report/report.hpp"

namespace pb::report {

void write_html_and_montages(const Json& results, const std::string& out_dir) {
  std::string html = "<!DOCTYPE html><html><head><meta charset=\"utf-8\"><title>porebench report</title></head><body><pre>";
  for (char c : summary_md(results)) html += c == '<' ? std::string("&lt;") : c == '&' ? std::string("&amp;") : std::string(1, c);
  html += "</pre></body></html>\n";
  write_text_atomic((std::filesystem::path(out_dir) / "report.html").string(), html);
}

}  // namespace pb::report
