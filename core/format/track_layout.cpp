// Track layout (SPEC.md, "Track layout"): from the index, the lead-in, then sectors back
// to back with a gap after each; servo wedges at fixed positions round(w * B / W); a
// sector that would overlap a wedge moves to the end of that wedge plus one gap, so
// sectors are never split. The last sector and its gap must end within the track.

#include <algorithm>

#include "common/error.hpp"
#include "format/track_codec.hpp"

namespace salvor::format {

namespace {

std::vector<ServoPlacement> wedge_positions(const TrackFormat& fmt, size_t bits_per_track) {
  std::vector<ServoPlacement> wedges;
  const uint64_t w_count = static_cast<uint64_t>(fmt.servo.wedges_per_track);
  for (uint64_t w = 0; w < w_count; ++w) {
    // round(w * B / W) in integers, halves rounded up
    const uint64_t start = (2 * w * bits_per_track + w_count) / (2 * w_count);
    wedges.push_back({static_cast<int>(w), start, start + static_cast<size_t>(fmt.servo.wedge_bits)});
  }
  return wedges;
}

// Places the sectors on a track of `bits_per_track`; returns the bit one past the gap
// after the last sector (> bits_per_track when they do not fit).
size_t place(const TrackFormat& fmt, size_t bits_per_track, TrackLayout& out) {
  out.wedges = wedge_positions(fmt, bits_per_track);
  out.sectors.clear();
  const size_t sync_bits = fmt.sync_mark.size();
  size_t pos = static_cast<size_t>(fmt.lead_in_bits);
  for (int s = 0; s < fmt.sectors_per_track; ++s) {
    bool moved = true;
    while (moved) {
      moved = false;
      for (const ServoPlacement& w : out.wedges) {
        if (pos < w.end_bit && w.start_bit < pos + static_cast<size_t>(fmt.sector_bits)) {
          pos = w.end_bit + static_cast<size_t>(fmt.gap_bits);
          moved = true;
        }
      }
      if (pos > bits_per_track) return pos + static_cast<size_t>(fmt.sector_bits);
    }
    SectorPlacement p;
    p.sector = s;
    p.preamble_bit = pos;
    p.sync_bit = pos + static_cast<size_t>(fmt.preamble_bits);
    p.header_bit = p.sync_bit + sync_bits;
    p.data_bit = p.header_bit + static_cast<size_t>(fmt.header_bits);
    p.end_bit = p.data_bit + static_cast<size_t>(fmt.data_bits) + static_cast<size_t>(fmt.postamble_bits);
    out.sectors.push_back(p);
    pos = p.end_bit + static_cast<size_t>(fmt.gap_bits);
  }
  return pos;
}

}  // namespace

LayoutCheck check_track_layout(const TrackFormat& fmt) {
  LayoutCheck check;
  const size_t end = place(fmt, fmt.bits_per_track, check.layout);
  if (end <= fmt.bits_per_track) {
    check.fits = true;
    check.minimum_bits_per_track = 0;
    return check;
  }
  // The shortest track that holds the sectors: no track shorter than the lead-in plus
  // every sector with its gap can; from there (or from one bit more than this track)
  // lengthen bit by bit, since wedge positions move with the length (a few thousand
  // cheap steps for the shipped formats; given up after 2^16).
  TrackLayout scratch;
  const size_t lower = static_cast<size_t>(fmt.lead_in_bits) +
                       static_cast<size_t>(fmt.sectors_per_track) * static_cast<size_t>(fmt.sector_bits + fmt.gap_bits);
  size_t candidate = std::max(lower, fmt.bits_per_track + 1);
  const size_t limit = candidate + (size_t{1} << 16);
  while (candidate < limit && place(fmt, candidate, scratch) > candidate) ++candidate;
  check.minimum_bits_per_track = candidate < limit ? candidate : 0;  // 0: none found
  std::string what = "geometry.bits_per_track: a track of " + std::to_string(fmt.bits_per_track) +
                     " bits is too short for " + std::to_string(fmt.sectors_per_track) + " sectors of " +
                     std::to_string(fmt.sector_bits) + " bits";
  if (check.minimum_bits_per_track) {
    what += ": " + std::to_string(check.minimum_bits_per_track - fmt.bits_per_track) +
            " bits short (a track of " + std::to_string(check.minimum_bits_per_track) + " bits would hold them)";
  } else {
    what += ": no track up to " + std::to_string(limit) + " bits holds them (does a sector fit between two servo wedges?)";
  }
  check.problem = what;
  check.layout = {};
  return check;
}

TrackLayout layout_track(const TrackFormat& fmt) {
  LayoutCheck check = check_track_layout(fmt);
  if (!check.fits) throw_input(fmt.source.string(), check.problem);
  return std::move(check.layout);
}

}  // namespace salvor::format
