#include "timing/loop_gains.hpp"

#include <cmath>
#include <string>

#include "common/error.hpp"

namespace salvor::timing {

LoopGains pi_loop_gains(double bn_t, double zeta, double k_det) {
  if (!(bn_t > 0.0 && bn_t < 0.25)) {
    throw_usage("timing loop", "noise bandwidth BnT " + std::to_string(bn_t) +
                                   " is outside (0, 0.25)");
  }
  if (!(zeta > 0.0) || !std::isfinite(zeta)) {
    throw_usage("timing loop", "damping " + std::to_string(zeta) + " must be positive");
  }
  if (!(k_det != 0.0) || !std::isfinite(k_det)) {
    throw_usage("timing loop", "detector gain must be finite and non-zero");
  }
  const double theta = bn_t / (zeta + 1.0 / (4.0 * zeta));
  const double denom = 1.0 + 2.0 * zeta * theta + theta * theta;
  return {4.0 * zeta * theta / denom / k_det, 4.0 * theta * theta / denom / k_det};
}

}  // namespace salvor::timing
