// Reference track encoder: the gap pattern at the phase of the index everywhere, then the
// servo wedges and the sectors written over it at their layout positions (SPEC.md,
// "Track layout"), and the NRZI write levels (1/(1 xor D) precoder).

#include "common/error.hpp"
#include "format/track_codec.hpp"

namespace salvor::format {

std::vector<uint8_t> encode_track(const TrackFormat& fmt, std::span<const uint8_t> image, int cylinder, int head) {
  if (cylinder < 0 || cylinder >= fmt.cylinders || head < 0 || head >= fmt.heads) {
    throw_usage(fmt.name, "track (cylinder " + std::to_string(cylinder) + ", head " + std::to_string(head) +
                              ") is outside the geometry " + std::to_string(fmt.cylinders) + " x " +
                              std::to_string(fmt.heads));
  }
  if (image.size() != fmt.image_bytes()) {
    throw_usage(fmt.name, "image of " + std::to_string(image.size()) + " bytes, the format holds " +
                              std::to_string(fmt.image_bytes()));
  }
  const TrackLayout layout = layout_track(fmt);
  std::vector<uint8_t> bits(fmt.bits_per_track);
  for (size_t p = 0; p < bits.size(); ++p) bits[p] = fmt.gap_pattern[p % fmt.gap_pattern.size()];
  for (const ServoPlacement& w : layout.wedges) {
    const std::vector<uint8_t> wb = encode_servo_wedge(fmt, w.wedge, cylinder);
    std::copy(wb.begin(), wb.end(), bits.begin() + static_cast<std::ptrdiff_t>(w.start_bit));
  }
  for (const SectorPlacement& s : layout.sectors) {
    const SectorHeader h = make_sector_header(fmt, cylinder, head, s.sector);
    const auto user = image.subspan(static_cast<size_t>(h.lba) * static_cast<size_t>(fmt.user_bytes),
                                    static_cast<size_t>(fmt.user_bytes));
    const std::vector<uint8_t> sb = encode_sector_bits(fmt, h, user);
    std::copy(sb.begin(), sb.end(), bits.begin() + static_cast<std::ptrdiff_t>(s.preamble_bit));
  }
  return bits;
}

std::vector<int8_t> nrzi_levels(std::span<const uint8_t> channel_bits, int8_t initial_level) {
  std::vector<int8_t> levels(channel_bits.size());
  int8_t level = initial_level < 0 ? int8_t{-1} : int8_t{1};
  for (size_t k = 0; k < channel_bits.size(); ++k) {
    if (channel_bits[k] & 1) level = static_cast<int8_t>(-level);  // b_k = a_k xor b_{k-1}
    levels[k] = level;
  }
  return levels;
}

}  // namespace salvor::format
