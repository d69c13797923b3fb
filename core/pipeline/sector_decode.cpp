#include "pipeline/sector_decode.hpp"

#include <algorithm>
#include <cmath>
#include <optional>
#include <string>

#include "format/rll89.hpp"
#include "format/track_codec.hpp"
#include "results/confidence.hpp"

namespace salvor::pipeline {

using results::SectorStatus;

SectorBytes sector_bytes_from_bits(const format::TrackFormat& fmt, std::span<const uint8_t> bits,
                                   std::span<const float> llr, std::span<const uint8_t> sample_flags) {
  const auto& code = format::rll89_code();
  const size_t nbytes = static_cast<size_t>(fmt.coded_bytes);
  SectorBytes sb;
  sb.bits.assign(nbytes * 9, 0);
  sb.llr.assign(nbytes * 9, 0.0f);
  sb.coded.assign(nbytes, 0);
  sb.erasure.assign(nbytes, 0);
  sb.reliability.assign(nbytes, 0.0f);
  const size_t present = std::min(nbytes, bits.size() / 9);
  std::copy(bits.begin(), bits.begin() + static_cast<long>(present * 9), sb.bits.begin());
  std::copy(llr.begin(), llr.begin() + static_cast<long>(std::min(llr.size(), present * 9)), sb.llr.begin());
  if (present > 0)
    code.decode_bits(std::span<const uint8_t>(sb.bits.data(), present * 9), std::span<uint8_t>(sb.coded.data(), present),
                     std::span<uint8_t>(sb.erasure.data(), present));
  double rel_sum = 0;
  size_t rel_n = 0, weak = 0;
  float rel_min = 1e30f;
  for (size_t b = 0; b < nbytes; ++b) {
    if (b >= present) {
      sb.erasure[b] = 1;
      ++weak;
      continue;
    }
    float m = 1e30f;
    bool flagged = false;
    for (size_t j = 0; j < 9; ++j) {
      size_t i = b * 9 + j;
      float r = std::fabs(sb.llr[i]);
      m = std::min(m, r);
      rel_sum += r;
      ++rel_n;
      flagged |= i < sample_flags.size() && sample_flags[i] != 0;
    }
    sb.reliability[b] = m;
    rel_min = std::min(rel_min, m);
    if (flagged) sb.erasure[b] = 1;
    if (m < kWeakLlr || sb.erasure[b]) ++weak;
  }
  sb.missing_bytes = nbytes - present;
  sb.reliability_min = rel_n ? rel_min : 0.0f;
  sb.reliability_mean = rel_n ? static_cast<float>(rel_sum / static_cast<double>(rel_n)) : 0.0f;
  sb.weak_fraction = static_cast<double>(weak) / static_cast<double>(nbytes);
  return sb;
}

namespace {

struct Attempt {
  format::PayloadDecode d;
  std::vector<uint8_t> flags;
};

// Keeps the least reliable `parity` hinted erasures of each codeword (more cannot decode).
void cap_flags(std::vector<uint8_t>& f, const std::vector<float>& rel, int I, int parity) {
  for (int i = 0; i < I; ++i) {
    std::vector<size_t> pos;
    for (size_t t = static_cast<size_t>(i); t < f.size(); t += static_cast<size_t>(I))
      if (f[t]) pos.push_back(t);
    if (static_cast<int>(pos.size()) <= parity) continue;
    std::sort(pos.begin(), pos.end(), [&](size_t p, size_t q) { return rel[p] < rel[q]; });
    for (size_t j = static_cast<size_t>(parity); j < pos.size(); ++j) f[pos[j]] = 0;
  }
}

// Plain decode, then the erasure search. Returns the verified attempt, or the plain one.
Attempt decode_with_erasures(const format::TrackFormat& fmt, const format::ReedSolomon& rs, uint32_t lba,
                             const std::vector<uint8_t>& coded,
                             const std::vector<uint8_t>& erasure, const std::vector<float>& rel, bool search,
                             int* r_used) {
  const int I = fmt.rs.interleave, parity = fmt.rs.parity_symbols;
  Attempt plain;
  plain.flags = erasure;
  cap_flags(plain.flags, rel, I, parity);
  plain.d = format::decode_sector_payload(fmt, rs, lba, coded, plain.flags);
  if (plain.d.verified || !search) return plain;
  std::vector<std::vector<size_t>> order(static_cast<size_t>(I));
  for (size_t t = 0; t < coded.size(); ++t) order[t % static_cast<size_t>(I)].push_back(t);
  for (auto& o : order) std::stable_sort(o.begin(), o.end(), [&](size_t p, size_t q) { return rel[p] < rel[q]; });
  for (int r = 2; r <= parity; r += 2) {
    Attempt t;
    t.flags = erasure;
    for (auto& o : order)
      for (int j = 0; j < r && j < static_cast<int>(o.size()); ++j) t.flags[o[static_cast<size_t>(j)]] = 1;
    cap_flags(t.flags, rel, I, parity);
    t.d = format::decode_sector_payload(fmt, rs, lba, coded, t.flags);
    if (t.d.verified) {
      if (r_used) *r_used = r;
      return t;
    }
  }
  return plain;
}

}  // namespace

void decode_sector_data(const format::TrackFormat& fmt, const SectorDecodeOptions& opt, const SectorBytes& sb,
                        results::SectorAttempt& a) {
  const int I = fmt.rs.interleave;
  const uint32_t lba = static_cast<uint32_t>(a.lba);
  a.rs_capacity = fmt.rs.parity_symbols;
  a.reliability_min = sb.reliability_min;
  a.reliability_mean = sb.reliability_mean;
  a.low_reliability_fraction = sb.weak_fraction;
  if (sb.missing_bytes > 0)
    a.notes.push_back("capture ends inside the sector: " + std::to_string(sb.missing_bytes) + " bytes missing");

  std::optional<format::ReedSolomon> own_rs;
  const format::ReedSolomon& rs = opt.rs ? *opt.rs : own_rs.emplace(format::make_sector_rs(fmt));

  int r_used = 0;
  bool searched = false;  // a search (not plain decoding) verified it: never "good"
  Attempt best = decode_with_erasures(fmt, rs, lba, sb.coded, sb.erasure, sb.reliability, opt.erasure_search, &r_used);
  if (best.d.verified && r_used > 0) searched = true;
  if (best.d.verified && r_used > 0)
    a.notes.push_back("verified with the " + std::to_string(r_used) + " least reliable bytes of each codeword erased");

  if (!best.d.verified && opt.chase_bits > 0) {
    // The least reliable bits of the codewords that failed (all of them if RS passed but
    // the CRC did not), flipped in every combination of up to three.
    std::vector<bool> failing(static_cast<size_t>(I), best.d.rs_failures == 0);
    for (int i = 0; i < I && i < static_cast<int>(best.d.corrected_per_interleave.size()); ++i)
      if (best.d.corrected_per_interleave[static_cast<size_t>(i)] < 0) failing[static_cast<size_t>(i)] = true;
    std::vector<size_t> cand;
    for (size_t b = 0; b < sb.coded.size(); ++b)
      if (failing[b % static_cast<size_t>(I)] && b * 9 + 9 <= sb.llr.size())
        for (size_t j = 0; j < 9; ++j) cand.push_back(b * 9 + j);
    const size_t k = std::min<size_t>(static_cast<size_t>(std::min(opt.chase_bits, 12)), cand.size());
    std::partial_sort(cand.begin(), cand.begin() + static_cast<long>(k), cand.end(),
                      [&](size_t p, size_t q) { return std::fabs(sb.llr[p]) < std::fabs(sb.llr[q]); });
    cand.resize(k);
    const auto& code = format::rll89_code();
    bool found = false;
    int tried = 0;
    for (uint32_t mask = 1; mask < (1u << k) && !found; ++mask) {
      if (__builtin_popcount(mask) > 3) continue;
      ++tried;
      std::vector<uint8_t> bits = sb.bits;
      std::vector<uint8_t> coded = sb.coded, er = sb.erasure;
      for (size_t c = 0; c < k; ++c) {
        if (!(mask & (1u << c))) continue;
        size_t i = cand[c];
        bits[i] ^= 1;
        size_t byte = i / 9;
        uint16_t word = 0;
        for (size_t j = 0; j < 9; ++j) word = static_cast<uint16_t>((word << 1) | bits[byte * 9 + j]);
        format::Rll89Decoded dec = code.decode(word);
        coded[byte] = dec.byte;
        er[byte] = dec.erasure ? 1 : 0;
      }
      Attempt t = decode_with_erasures(fmt, rs, lba, coded, er, sb.reliability, false, nullptr);
      if (t.d.verified) {
        best = std::move(t);
        found = true;
        searched = true;
        a.notes.push_back("verified by the Chase-style search: " + std::to_string(__builtin_popcount(mask)) +
                          " weak bit(s) flipped, candidate " + std::to_string(tried));
      }
    }
    if (!found) a.notes.push_back("Chase-style search over " + std::to_string(k) + " weak bits: " +
                                  std::to_string(tried) + " candidates, none verified");
  }

  const format::PayloadDecode& d = best.d;
  std::vector<int> eras(static_cast<size_t>(I), 0);
  for (size_t t = 0; t < best.flags.size(); ++t)
    if (best.flags[t]) ++eras[t % static_cast<size_t>(I)];
  a.rs_corrected = d.corrected_per_interleave;
  a.rs_erasures = eras;
  a.crc = d.crc_ok ? "pass" : "fail";
  a.data = d.user_data;
  if (d.verified) {
    a.status = (d.rs_corrected > 0 || searched) ? SectorStatus::corrected : SectorStatus::good;
  } else {
    a.status = SectorStatus::failed;
    if (d.rs_failures > 0) a.notes.push_back(std::to_string(d.rs_failures) + " codeword(s) uncorrectable");
    else a.notes.push_back("RS decoded but the CRC-32 failed: rejected");
  }
  a.confidence = results::sector_confidence(a);
}

}  // namespace salvor::pipeline
