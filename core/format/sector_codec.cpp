// The sector encoder and payload decoder of tf1 (SPEC.md, "Sector"):
//   header: LBA, cylinder, head, sector, flags, version (big-endian) + CRC-16 (big-endian),
//           8/9-coded, not scrambled;
//   data:   user data + CRC-32 (little-endian) -> additive scrambler seeded by the LBA ->
//           byte j to RS codeword j % I at position j / I -> systematic RS per codeword ->
//           transmitted symbol-interleaved (symbol p of codewords 0..I-1, then p+1) -> 8/9 code.
// RS parity is not scrambled: the 8/9 code already bounds the zero runs.

#include <algorithm>

#include "common/error.hpp"
#include "format/crc.hpp"
#include "format/reed_solomon.hpp"
#include "format/rll89.hpp"
#include "format/scrambler.hpp"
#include "format/track_codec.hpp"

namespace salvor::format {

namespace {


Scrambler make_scrambler(const TrackFormat& fmt, uint32_t lba) {
  return Scrambler({fmt.scrambler_degree, fmt.scrambler_taps, scrambler_seed_for_lba(lba, fmt.scrambler_degree)});
}

void append_repeating(std::vector<uint8_t>& out, const std::vector<uint8_t>& pattern, size_t count) {
  for (size_t i = 0; i < count; ++i) out.push_back(pattern[i % pattern.size()]);
}

void append_coded(std::vector<uint8_t>& out, std::span<const uint8_t> bytes) {
  const std::vector<uint8_t> bits = rll89_code().encode_bits(bytes);
  out.insert(out.end(), bits.begin(), bits.end());
}

}  // namespace

SectorHeader make_sector_header(const TrackFormat& fmt, int cylinder, int head, int sector) {
  SectorHeader h;
  h.lba = static_cast<uint32_t>(fmt.lba(cylinder, head, sector));
  h.cylinder = static_cast<uint16_t>(cylinder);
  h.head = static_cast<uint8_t>(head);
  h.sector = static_cast<uint8_t>(sector);
  h.flags = 0;
  return h;
}

std::vector<uint8_t> encode_header_bytes(const TrackFormat& fmt, const SectorHeader& h) {
  std::vector<uint8_t> b = {
      static_cast<uint8_t>(h.lba >> 24), static_cast<uint8_t>(h.lba >> 16), static_cast<uint8_t>(h.lba >> 8),
      static_cast<uint8_t>(h.lba),       static_cast<uint8_t>(h.cylinder >> 8), static_cast<uint8_t>(h.cylinder),
      h.head,                            h.sector,
      h.flags,                           static_cast<uint8_t>(fmt.version)};
  const uint32_t crc = Crc(fmt.header_crc).compute(b);
  for (int shift = fmt.header_crc.width - 8; shift >= 0; shift -= 8) b.push_back(static_cast<uint8_t>(crc >> shift));
  return b;
}

std::optional<SectorHeader> decode_header_bytes(const TrackFormat& fmt, std::span<const uint8_t> bytes) {
  if (static_cast<int>(bytes.size()) != fmt.header_bytes) return std::nullopt;
  uint32_t stored = 0;
  for (int i = kHeaderFieldBytes; i < fmt.header_bytes; ++i) stored = (stored << 8) | bytes[i];
  if (Crc(fmt.header_crc).compute(bytes.first(kHeaderFieldBytes)) != stored) return std::nullopt;
  SectorHeader h;
  h.lba = (uint32_t{bytes[0]} << 24) | (uint32_t{bytes[1]} << 16) | (uint32_t{bytes[2]} << 8) | bytes[3];
  h.cylinder = static_cast<uint16_t>((bytes[4] << 8) | bytes[5]);
  h.head = bytes[6];
  h.sector = bytes[7];
  h.flags = bytes[8];
  // A header of another format version, or with reserved flag bits set, is not one of
  // ours even when its CRC checks.
  if (bytes[9] != static_cast<uint8_t>(fmt.version)) return std::nullopt;
  if (h.flags & ~kHeaderFlagRelocated) return std::nullopt;
  return h;
}

std::vector<uint8_t> encode_sector_payload(const TrackFormat& fmt, uint32_t lba, std::span<const uint8_t> user_data) {
  if (static_cast<int>(user_data.size()) != fmt.user_bytes) {
    throw_usage(fmt.name, "sector payload of " + std::to_string(user_data.size()) + " bytes, the format has " +
                              std::to_string(fmt.user_bytes));
  }
  std::vector<uint8_t> payload(user_data.begin(), user_data.end());
  const uint32_t crc = Crc(fmt.data_crc).compute(user_data);
  for (int i = 0; i < fmt.data_crc_bytes; ++i) payload.push_back(static_cast<uint8_t>(crc >> (8 * i)));
  make_scrambler(fmt, lba).apply(payload);

  const int interleave = fmt.rs.interleave;
  const ReedSolomon rs = make_sector_rs(fmt);
  std::vector<uint8_t> coded(static_cast<size_t>(fmt.coded_bytes));
  std::vector<uint8_t> data(static_cast<size_t>(fmt.codeword_data_bytes));
  for (int i = 0; i < interleave; ++i) {
    for (int p = 0; p < fmt.codeword_data_bytes; ++p) data[p] = payload[static_cast<size_t>(p) * interleave + i];
    const std::vector<uint8_t> word = rs.encode(data);
    for (int p = 0; p < fmt.codeword_bytes; ++p) coded[static_cast<size_t>(p) * interleave + i] = word[p];
  }
  return coded;
}

ReedSolomon make_sector_rs(const TrackFormat& fmt) {
  return ReedSolomon({fmt.rs.field_polynomial, fmt.rs.first_root, fmt.rs.primitive_element,
                      fmt.rs.parity_symbols, fmt.codeword_bytes});
}

PayloadDecode decode_sector_payload(const TrackFormat& fmt, uint32_t lba, std::span<const uint8_t> coded,
                                    std::span<const uint8_t> erasure_flags) {
  return decode_sector_payload(fmt, make_sector_rs(fmt), lba, coded, erasure_flags);
}

PayloadDecode decode_sector_payload(const TrackFormat& fmt, const ReedSolomon& rs, uint32_t lba,
                                    std::span<const uint8_t> coded, std::span<const uint8_t> erasure_flags) {
  PayloadDecode out;
  const int interleave = fmt.rs.interleave;
  if (static_cast<int>(coded.size()) != fmt.coded_bytes ||
      (!erasure_flags.empty() && erasure_flags.size() != coded.size())) {
    out.user_data.assign(static_cast<size_t>(fmt.user_bytes), 0);
    out.rs_failures = interleave;
    out.corrected_per_interleave.assign(static_cast<size_t>(interleave), -1);
    return out;
  }
  std::vector<uint8_t> payload(static_cast<size_t>(fmt.payload_bytes));
  std::vector<uint8_t> word(static_cast<size_t>(fmt.codeword_bytes));
  std::vector<int> erasures;
  for (int i = 0; i < interleave; ++i) {
    erasures.clear();
    for (int p = 0; p < fmt.codeword_bytes; ++p) {
      const size_t at = static_cast<size_t>(p) * interleave + i;
      word[p] = coded[at];
      if (!erasure_flags.empty() && erasure_flags[at]) erasures.push_back(p);
    }
    // More erasures than parity cannot be decoded; then try as if none were flagged
    // (the flagged bytes are still the best guesses of the modulation decoder).
    std::span<const int> used = erasures;
    if (static_cast<int>(erasures.size()) > fmt.rs.parity_symbols) used = {};
    RsDecodeResult r = rs.decode(word, used);
    if (!r.ok && !used.empty()) {
      // An erasure flag on a correct byte wastes parity only; errors-only is a second chance.
      r = rs.decode(word, {});
      if (r.ok) used = {};
    }
    out.erasures_used += static_cast<int>(used.size());
    if (r.ok) {
      out.rs_corrected += r.corrected;
      out.corrected_per_interleave.push_back(r.corrected);
    } else {
      ++out.rs_failures;
      out.corrected_per_interleave.push_back(-1);
    }
    for (int p = 0; p < fmt.codeword_data_bytes; ++p) payload[static_cast<size_t>(p) * interleave + i] = word[p];
  }
  make_scrambler(fmt, lba).apply(payload);
  out.user_data.assign(payload.begin(), payload.begin() + fmt.user_bytes);
  uint32_t stored = 0;
  for (int b = fmt.data_crc_bytes - 1; b >= 0; --b) stored = (stored << 8) | payload[static_cast<size_t>(fmt.user_bytes + b)];
  out.crc_ok = Crc(fmt.data_crc).compute(out.user_data) == stored;
  out.verified = out.crc_ok && out.rs_failures == 0;
  return out;
}

std::vector<uint8_t> encode_sector_bits(const TrackFormat& fmt, const SectorHeader& h,
                                        std::span<const uint8_t> user_data) {
  std::vector<uint8_t> bits;
  bits.reserve(static_cast<size_t>(fmt.sector_bits));
  append_repeating(bits, fmt.preamble_pattern, static_cast<size_t>(fmt.preamble_bits));
  bits.insert(bits.end(), fmt.sync_mark.begin(), fmt.sync_mark.end());
  append_coded(bits, encode_header_bytes(fmt, h));
  append_coded(bits, encode_sector_payload(fmt, h.lba, user_data));
  append_repeating(bits, fmt.postamble_pattern, static_cast<size_t>(fmt.postamble_bits));
  if (static_cast<int>(bits.size()) != fmt.sector_bits) throw_internal("sector length mismatch");
  return bits;
}

std::vector<uint8_t> encode_servo_wedge(const TrackFormat& fmt, int wedge, int cylinder) {
  const ServoParams& sv = fmt.servo;
  std::vector<uint8_t> bits;
  bits.reserve(static_cast<size_t>(sv.wedge_bits));
  append_repeating(bits, sv.preamble_pattern, static_cast<size_t>(sv.preamble_bits));
  bits.insert(bits.end(), sv.mark.begin(), sv.mark.end());
  const uint16_t gray = gray_code(static_cast<uint16_t>(cylinder));
  const uint8_t fields[kServoFieldBytes] = {static_cast<uint8_t>(wedge), static_cast<uint8_t>(gray >> 8),
                                            static_cast<uint8_t>(gray)};
  append_coded(bits, fields);
  append_repeating(bits, sv.fill_pattern, static_cast<size_t>(sv.wedge_bits) - bits.size());
  return bits;
}

}  // namespace salvor::format
