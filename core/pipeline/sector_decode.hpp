#pragma once
// From a sector's detected data bits to verified bytes: 8/9 decoding (invalid words are
// erasures), Reed–Solomon errors-and-erasures decoding, and CRC-32. When plain decoding
// fails, two searches use the detector's reliabilities; every candidate is accepted only
// when RS and the CRC-32 verify, so a search can never produce a wrong "verified" sector
// that plain decoding would not also have accepted with the same (2^-32) CRC risk per try:
//   - erasure search: erase the r least reliable bytes of every codeword, r = 2, 4, ..., n-k
//     (GMD-style; Forney, "Generalized minimum distance decoding", IEEE Trans. IT-12, 1966);
//   - Chase-style search: flip subsets of the least reliable bits of the codewords that
//     failed and decode again (Chase, IEEE Trans. IT-18(1), 1972), bounded by chase_bits.

#include <cstdint>
#include <span>
#include <vector>

#include "format/reed_solomon.hpp"
#include "format/track_format.hpp"
#include "results/sector_result.hpp"

namespace salvor::pipeline {

struct SectorBytes {
  std::vector<uint8_t> bits;       // data channel bits (coded_bytes * 9; missing ones 0)
  std::vector<float> llr;          // their LLRs (0 where missing)
  std::vector<uint8_t> coded;      // 8/9-decoded bytes
  std::vector<uint8_t> erasure;    // invalid 8/9 word, flagged sample, or missing
  std::vector<float> reliability;  // min |LLR| over each byte's 9 bits
  size_t missing_bytes = 0;        // bytes beyond the end of the capture
  float reliability_min = 0, reliability_mean = 0;
  double weak_fraction = 0;        // share of bytes with a bit below kWeakLlr or erased
};

inline constexpr float kWeakLlr = 2.0f;  // P(bit error) ~ 1/(1+e^2) = 12 %

// `bits`, `llr` and `sample_flags` hold the data area as detected (may be shorter than
// coded_bytes * 9 when the capture ended inside the sector).
SectorBytes sector_bytes_from_bits(const format::TrackFormat& fmt, std::span<const uint8_t> bits,
                                   std::span<const float> llr, std::span<const uint8_t> sample_flags);

struct SectorDecodeOptions {
  bool erasure_search = true;
  int chase_bits = 0;  // 0: no Chase search; else the least reliable bits tried (<= 12)
  const format::ReedSolomon* rs = nullptr;  // the format's code, built once by the caller; null: built per call
};

// Fills a.status, data, rs_corrected, rs_erasures, crc, reliabilities, confidence and
// notes. a.lba must be set (it seeds the descrambler).
void decode_sector_data(const format::TrackFormat& fmt, const SectorDecodeOptions& opt, const SectorBytes& sb,
                        results::SectorAttempt& a);

}  // namespace salvor::pipeline
