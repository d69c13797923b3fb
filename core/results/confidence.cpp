#include "results/confidence.hpp"

#include <algorithm>

namespace salvor::results {

double sector_confidence(const SectorAttempt& a) {
  const double weak = std::clamp(a.low_reliability_fraction, 0.0, 1.0);
  switch (a.status) {
    case SectorStatus::good:
    case SectorStatus::corrected: {
      double used = 0.0;  // worst share of the correction capacity used by any interleave
      if (a.rs_capacity > 0) {
        for (size_t i = 0; i < a.rs_corrected.size(); ++i) {
          int e = std::max(0, a.rs_corrected[i]);
          int s = i < a.rs_erasures.size() ? a.rs_erasures[i] : 0;
          // An erasure that turned out right still counts: it spent capacity.
          used = std::max(used, (2.0 * std::max(0, e - s) + s) / a.rs_capacity);
        }
      }
      used = std::clamp(used, 0.0, 1.0);
      double c = 1.0 - 0.5 * used * (0.5 + 0.5 * weak);
      return std::clamp(c, 0.5 + 1e-6, 1.0);
    }
    case SectorStatus::failed:
      return 0.45 * (1.0 - weak);
    case SectorStatus::conflict:
      return 0.25;
    case SectorStatus::missing:
      return 0.0;
  }
  return 0.0;
}

}  // namespace salvor::results
