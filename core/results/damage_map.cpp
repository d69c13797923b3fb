#include "results/damage_map.hpp"

#include <algorithm>
#include <cstdio>
#include <sstream>

namespace salvor::results {

StatusCounts count_statuses(const std::vector<SectorAttempt>& all) {
  StatusCounts c;
  for (const auto& a : all) {
    switch (a.status) {
      case SectorStatus::good: ++c.good; break;
      case SectorStatus::corrected: ++c.corrected; break;
      case SectorStatus::failed: ++c.failed; break;
      case SectorStatus::missing: ++c.missing; break;
      case SectorStatus::conflict: ++c.conflict; break;
    }
  }
  return c;
}

nlohmann::json damage_map_json(const Geometry& g, const std::vector<SectorAttempt>& all) {
  StatusCounts c = count_statuses(all);
  nlohmann::json j;
  j["salvor_damage_map"] = 1;
  j["geometry"] = {{"heads", g.heads},
                   {"cylinders", g.cylinders},
                   {"sectors_per_track", g.sectors_per_track},
                   {"sector_bytes", g.sector_bytes}};
  j["counts"] = {{"total", c.total()},     {"good", c.good},       {"corrected", c.corrected},
                 {"failed", c.failed},     {"missing", c.missing}, {"conflict", c.conflict}};
  nlohmann::json sectors = nlohmann::json::array();
  for (const auto& a : all) {
    sectors.push_back({{"lba", a.lba},
                       {"cylinder", a.cylinder},
                       {"head", a.head},
                       {"sector", a.sector},
                       {"status", to_string(a.status)},
                       {"confidence", a.confidence},
                       {"attempt", a.attempt}});
  }
  j["sectors"] = std::move(sectors);
  return j;
}

const char* status_colour(SectorStatus s) {
  switch (s) {
    case SectorStatus::good: return "#0072B2";       // blue
    case SectorStatus::corrected: return "#56B4E9";  // sky blue
    case SectorStatus::failed: return "#E69F00";     // orange
    case SectorStatus::missing: return "#1A1A1A";    // near black
    case SectorStatus::conflict: return "#CC79A7";   // reddish purple
  }
  return "#999999";
}

namespace {
std::string esc(const std::string& s) {
  std::string o;
  for (char ch : s) {
    switch (ch) {
      case '<': o += "&lt;"; break;
      case '>': o += "&gt;"; break;
      case '&': o += "&amp;"; break;
      case '"': o += "&quot;"; break;
      default: o += ch;
    }
  }
  return o;
}
}  // namespace

std::string damage_map_svg(const Geometry& g, const std::vector<SectorAttempt>& all,
                           const std::string& title) {
  // Cell size shrinks with the geometry so a head with thousands of sectors per track
  // still fits a page; runs of equal status on one track are merged into one rectangle
  // so the file stays small.
  const int spt = std::max(1, g.sectors_per_track);
  const int cyl = std::max(1, g.cylinders);
  double cell_w = std::clamp(640.0 / spt, 0.5, 24.0);
  double cell_h = std::clamp(480.0 / cyl, 0.5, 16.0);
  const double margin_left = 56, margin_top = 64, panel_gap = 40, legend_h = 70;
  const double panel_w = cell_w * spt, panel_h = cell_h * cyl;
  const double width = margin_left + g.heads * panel_w + (g.heads - 1) * panel_gap + 24;
  const double height = margin_top + panel_h + legend_h + 30;

  std::vector<const SectorAttempt*> by_pos(static_cast<size_t>(g.heads) * cyl * spt, nullptr);
  for (const auto& a : all) {
    if (a.head < 0 || a.head >= g.heads || a.cylinder < 0 || a.cylinder >= cyl || a.sector < 0 ||
        a.sector >= spt)
      continue;
    by_pos[(static_cast<size_t>(a.head) * cyl + a.cylinder) * spt + a.sector] = &a;
  }

  std::ostringstream o;
  o.setf(std::ios::fixed);
  o.precision(2);
  o << "<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"" << std::max(width, 560.0) << "\" height=\""
    << height << "\" viewBox=\"0 0 " << std::max(width, 560.0) << " " << height
    << "\" font-family=\"sans-serif\" font-size=\"12\">\n";
  o << "<rect width=\"100%\" height=\"100%\" fill=\"#ffffff\"/>\n";
  o << "<text x=\"" << margin_left << "\" y=\"22\" font-size=\"15\" font-weight=\"bold\">" << esc(title)
    << "</text>\n";
  for (int h = 0; h < g.heads; ++h) {
    double x0 = margin_left + h * (panel_w + panel_gap);
    o << "<g class=\"head\" data-head=\"" << h << "\">\n";
    o << "<text x=\"" << x0 << "\" y=\"" << margin_top - 22 << "\" font-weight=\"bold\">head " << h
      << "</text>\n";
    o << "<text x=\"" << x0 << "\" y=\"" << margin_top - 8 << "\" font-size=\"10\">sector 0 → "
      << spt - 1 << "</text>\n";
    for (int c = 0; c < cyl; ++c) {
      double y = margin_top + c * cell_h;
      int s = 0;
      while (s < spt) {
        const SectorAttempt* a = by_pos[(static_cast<size_t>(h) * cyl + c) * spt + s];
        SectorStatus st = a ? a->status : SectorStatus::missing;
        int e = s + 1;
        while (e < spt) {
          const SectorAttempt* b = by_pos[(static_cast<size_t>(h) * cyl + c) * spt + e];
          if ((b ? b->status : SectorStatus::missing) != st) break;
          ++e;
        }
        o << "<rect x=\"" << x0 + s * cell_w << "\" y=\"" << y << "\" width=\"" << (e - s) * cell_w
          << "\" height=\"" << cell_h << "\" fill=\"" << status_colour(st) << "\"";
        if (cell_w >= 3 && cell_h >= 3) o << " stroke=\"#ffffff\" stroke-width=\"0.5\"";
        o << "><title>head " << h << " cylinder " << c << " sectors " << s << "–" << e - 1 << ": "
          << to_string(st) << "</title></rect>\n";
        s = e;
      }
    }
    // Cylinder axis labels: first, last and a few in between.
    int step = std::max(1, cyl / 6);
    for (int c = 0; c < cyl; c += step) {
      o << "<text x=\"" << x0 - 4 << "\" y=\"" << margin_top + (c + 0.5) * cell_h + 4
        << "\" font-size=\"10\" text-anchor=\"end\">" << c << "</text>\n";
    }
    o << "</g>\n";
  }
  o << "<text x=\"12\" y=\"" << margin_top + panel_h / 2 << "\" font-size=\"10\" transform=\"rotate(-90 12 "
    << margin_top + panel_h / 2 << ")\" text-anchor=\"middle\">cylinder</text>\n";

  StatusCounts cnt = count_statuses(all);
  const std::pair<SectorStatus, uint64_t> legend[] = {{SectorStatus::good, cnt.good},
                                                      {SectorStatus::corrected, cnt.corrected},
                                                      {SectorStatus::failed, cnt.failed},
                                                      {SectorStatus::missing, cnt.missing},
                                                      {SectorStatus::conflict, cnt.conflict}};
  double ly = margin_top + panel_h + 28;
  double lx = margin_left;
  o << "<g class=\"legend\">\n";
  for (const auto& [st, n] : legend) {
    o << "<rect x=\"" << lx << "\" y=\"" << ly - 11 << "\" width=\"14\" height=\"14\" fill=\""
      << status_colour(st) << "\" stroke=\"#333333\" stroke-width=\"0.5\"/>";
    o << "<text x=\"" << lx + 20 << "\" y=\"" << ly << "\">" << to_string(st) << " " << n << "</text>\n";
    lx += 105;
  }
  o << "</g>\n";
  o << "<text x=\"" << margin_left << "\" y=\"" << ly + 26 << "\">" << cnt.total() << " sectors, "
    << cnt.verified() << " verified ("
    << (cnt.total() ? 100.0 * static_cast<double>(cnt.verified()) / static_cast<double>(cnt.total()) : 0.0)
    << " %)</text>\n";
  o << "</svg>\n";
  return o.str();
}

}  // namespace salvor::results
