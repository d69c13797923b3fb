#pragma once
// Per-sector confidence in [0, 1]. It orders sectors by how likely their bytes are
// wrong, and it keeps the statuses apart:
//
//   verified (good/corrected):  0.5 < c <= 1
//       c = 1 - 0.5 * max_i((2 e_i + s_i) / (n - k))  * (0.5 + 0.5 * w)
//     where e_i, s_i are the errors corrected and erasures used in interleave i and
//     n - k the parity per codeword, and w (0..1) the share of weak data bytes. A
//     sector that needed no correction gets 1; one that used the whole correction
//     capacity of some interleave falls towards 0.5. The reasoning: the risk of a silent
//     error after a CRC check is a Reed–Solomon miscorrection that the CRC-32 also
//     missed; miscorrection needs the error pattern to be near the decoding radius, so
//     the risk grows as the margin to the radius shrinks.
//   failed:   0 <= c < 0.5,  c = 0.45 * (1 - w)  (w = share of data bytes with a weak
//     bit): a best guess with few weak bytes is more likely close to the truth.
//   missing:  c = 0.
//   conflict: c = 0.25 (two verified contents disagree: neither can be trusted alone).
//
// These are ordering scores, not calibrated probabilities (the calibration of the
// detectors' LLRs is measured by `salvor compare`).

#include "results/sector_result.hpp"

namespace salvor::results {

double sector_confidence(const SectorAttempt& a);

}  // namespace salvor::results
