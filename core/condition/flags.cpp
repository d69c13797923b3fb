#include "condition/flags.hpp"

#include <cstring>

namespace salvor {

std::string flag_kind_name(FlagKind kind) {
  switch (kind) {
    case flag_clipped: return "clipped";
    case flag_thermal_asperity: return "thermal_asperity";
    case flag_dropout: return "dropout";
  }
  return "unknown";
}

void SpanCollector::add(uint64_t first_index, std::span<const uint8_t> flags) {
  uint8_t open_mask = 0;  // the kinds now open, as flag bits
  for (int k = 0; k < kinds; ++k) open_mask = static_cast<uint8_t>(open_mask | (open_[k] ? 1u << k : 0u));
  constexpr uint8_t kind_mask = (1u << kinds) - 1;
  const uint64_t kinds8 = 0x0101010101010101ull * kind_mask;
  for (size_t i = 0; i < flags.size(); ++i) {
    // Eight flag bytes at a time while nothing opens or closes (almost every sample).
    const uint64_t same8 = 0x0101010101010101ull * open_mask;
    while (i + 8 <= flags.size()) {
      uint64_t w;
      std::memcpy(&w, flags.data() + i, 8);
      if ((w & kinds8) != same8) break;
      i += 8;
    }
    if (i >= flags.size()) break;
    const uint8_t f = flags[i];
    if ((f & kind_mask) == open_mask) continue;
    open_mask = f & kind_mask;
    for (int k = 0; k < kinds; ++k) {
      const bool on = (f >> k) & 1u;
      if (on && !open_[k]) {
        open_[k] = true;
        open_start_[k] = first_index + i;
      } else if (!on && open_[k]) {
        open_[k] = false;
        spans_.push_back({open_start_[k], first_index + i, static_cast<FlagKind>(1u << k)});
      }
    }
  }
}

void SpanCollector::close(uint64_t end_index) {
  for (int k = 0; k < kinds; ++k) {
    if (open_[k]) {
      open_[k] = false;
      spans_.push_back({open_start_[k], end_index, static_cast<FlagKind>(1u << k)});
    }
  }
}

std::vector<FlagSpan> SpanCollector::take_spans() {
  std::vector<FlagSpan> out;
  out.swap(spans_);
  return out;
}

void SpanCollector::reset() {
  for (int k = 0; k < kinds; ++k) open_[k] = false;
  spans_.clear();
}

}  // namespace salvor
