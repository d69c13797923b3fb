#pragma once
// The final status of every sector of an image, as data (damage-map.json) and as a
// picture an examiner reads at a glance (damage-map.svg): one panel per head, cylinders
// down, sectors across, colour by status, a legend with counts.

#include <array>
#include <cstdint>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "results/sector_result.hpp"

namespace salvor::results {

struct Geometry {
  int heads = 0;
  int cylinders = 0;
  int sectors_per_track = 0;
  int sector_bytes = 0;
  uint64_t total_sectors() const {
    return static_cast<uint64_t>(heads) * cylinders * sectors_per_track;
  }
};

struct StatusCounts {
  uint64_t good = 0, corrected = 0, failed = 0, missing = 0, conflict = 0;
  uint64_t total() const { return good + corrected + failed + missing + conflict; }
  uint64_t verified() const { return good + corrected; }
};

// `final_attempts[lba]` is the best attempt of each sector (status missing if none).
StatusCounts count_statuses(const std::vector<SectorAttempt>& final_attempts);
nlohmann::json damage_map_json(const Geometry& g, const std::vector<SectorAttempt>& final_attempts);
std::string damage_map_svg(const Geometry& g, const std::vector<SectorAttempt>& final_attempts,
                           const std::string& title);

// Colours by status: a colour-blind-safe set taken from the Okabe–Ito palette
// (Okabe & Ito, "Color Universal Design", 2008), with lightness kept apart so the
// statuses also read in greyscale.
const char* status_colour(SectorStatus s);

}  // namespace salvor::results
