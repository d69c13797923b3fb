#pragma once
// The input check shared by the trellis detectors: a non-finite sample that is not flagged
// as erased is refused with SALVOR_E_INPUT, naming its index in the block.

#include <bit>
#include <cmath>
#include <cstdint>
#include <span>
#include <string>

#include "common/error.hpp"

namespace salvor::trellis {

inline void refuse_unflagged_non_finite(std::span<const float> samples,
                                        std::span<const uint8_t> erasure) {
  // A vectorisable pass over the exponent bits first; the exact check only if it fails.
  uint32_t non_finite = 0;
  for (const float v : samples)
    non_finite |= (std::bit_cast<uint32_t>(v) & 0x7f800000u) == 0x7f800000u;
  if (!non_finite) return;
  for (size_t k = 0; k < samples.size(); ++k)
    if (!std::isfinite(samples[k]) && (erasure.empty() || !erasure[k]))
      throw_input("detector input",
                  "sample " + std::to_string(k) + " of the block is not a finite number");
}

}  // namespace salvor::trellis
