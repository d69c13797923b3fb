// Bit-exact track parser: sync-mark search with a Hamming tolerance (common practice:
// declare sync when popcount(window xor mark) <= E), then the header and the data of
// each sector found; the servo wedges of the nominal layout are skipped. A sector whose
// header fails gets its LBA from its layout position and the track's cylinder and head.

#include <algorithm>

#include "common/error.hpp"
#include "format/rll89.hpp"
#include "format/track_codec.hpp"

namespace salvor::format {

std::vector<ParsedSector> parse_track(const TrackFormat& fmt, std::span<const uint8_t> channel_bits) {
  return parse_track(fmt, channel_bits, ParseOptions{});
}

std::vector<ParsedSector> parse_track(const TrackFormat& fmt, std::span<const uint8_t> channel_bits,
                                      const ParseOptions& options) {
  const TrackLayout layout = layout_track(fmt);
  const Rll89Code& code = rll89_code();
  const size_t sync_len = fmt.sync_mark.size();

  // Search the spans between servo wedges only, so that wedge contents cannot pose as a mark.
  std::vector<std::pair<size_t, size_t>> spans;  // [begin, end)
  {
    size_t begin = 0;
    if (options.skip_servo_wedges) {
      for (const ServoPlacement& w : layout.wedges) {
        if (w.start_bit > begin) spans.emplace_back(begin, std::min(w.start_bit, channel_bits.size()));
        begin = std::max(begin, w.end_bit);
      }
    }
    if (begin < channel_bits.size()) spans.emplace_back(begin, channel_bits.size());
  }
  std::vector<SyncHit> hits;
  for (const auto& [begin, end] : spans) {
    if (end <= begin) continue;
    for (SyncHit h : find_sync_marks(channel_bits.subspan(begin, end - begin), fmt.sync_mark, fmt.sync_tolerance)) {
      h.position += begin;
      hits.push_back(h);
    }
  }

  std::vector<ParsedSector> sectors;
  struct CodedData {
    std::vector<uint8_t> bytes, erased;
  };
  std::vector<CodedData> coded_data;  // per sector, decoded once its LBA is known
  size_t next_allowed = 0;  // a sync mark inside a sector already read is data, not a mark
  for (const SyncHit& hit : hits) {
    if (hit.position < next_allowed) continue;
    ParsedSector ps;
    ps.sync_distance = hit.distance;
    ps.where.sync_bit = hit.position;
    ps.where.preamble_bit = hit.position >= static_cast<size_t>(fmt.preamble_bits)
                                ? hit.position - static_cast<size_t>(fmt.preamble_bits)
                                : 0;
    ps.where.header_bit = hit.position + sync_len;
    ps.where.data_bit = ps.where.header_bit + static_cast<size_t>(fmt.header_bits);
    ps.where.end_bit = ps.where.data_bit + static_cast<size_t>(fmt.data_bits) + static_cast<size_t>(fmt.postamble_bits);
    // The nearest nominal sector gives the sector number (refined by the header if it checks).
    int nearest = 0;
    size_t best = SIZE_MAX;
    for (const SectorPlacement& s : layout.sectors) {
      const size_t d = s.sync_bit > hit.position ? s.sync_bit - hit.position : hit.position - s.sync_bit;
      if (d < best) {
        best = d;
        nearest = s.sector;
      }
    }
    ps.where.sector = nearest;

    // Read a field of `bytes` 8/9 words at `bit`; bits past the end of the stream are erased.
    auto read_field = [&](size_t bit, int nbytes, std::vector<uint8_t>& out, std::vector<uint8_t>& erased) {
      out.assign(static_cast<size_t>(nbytes), 0);
      erased.assign(static_cast<size_t>(nbytes), 0);
      int count = 0;
      for (int i = 0; i < nbytes; ++i) {
        const size_t at = bit + static_cast<size_t>(i) * 9;
        if (at + 9 > channel_bits.size()) {
          erased[i] = 1;
          ps.truncated = true;
          ++count;
          continue;
        }
        uint16_t w = 0;
        for (int t = 0; t < 9; ++t) w = static_cast<uint16_t>((w << 1) | (channel_bits[at + t] & 1u));
        const Rll89Decoded d = code.decode(w);
        out[i] = d.byte;
        erased[i] = d.erasure ? 1 : 0;
        count += d.erasure ? 1 : 0;
      }
      return count;
    };
    std::vector<uint8_t> header_bytes, header_erased;
    ps.header_erasures = read_field(ps.where.header_bit, fmt.header_bytes, header_bytes, header_erased);
    ps.header = decode_header_bytes(fmt, header_bytes);
    if (ps.header) {
      ps.lba = ps.header->lba;
      ps.where.sector = ps.header->sector;
    }
    CodedData cd;
    read_field(ps.where.data_bit, fmt.coded_bytes, cd.bytes, cd.erased);
    coded_data.push_back(std::move(cd));
    sectors.push_back(std::move(ps));
    next_allowed = sectors.back().where.end_bit;
  }

  // The track's cylinder and head: the caller's, else the first verified header's.
  std::optional<int> cylinder = options.cylinder, head = options.head;
  for (const ParsedSector& s : sectors) {
    if (s.header && (!cylinder || !head)) {
      if (!cylinder) cylinder = s.header->cylinder;
      if (!head) head = s.header->head;
    }
  }
  for (size_t i = 0; i < sectors.size(); ++i) {
    ParsedSector& s = sectors[i];
    if (!s.lba && cylinder && head && *cylinder >= 0 && *cylinder < fmt.cylinders && *head >= 0 &&
        *head < fmt.heads) {
      s.lba = static_cast<uint32_t>(fmt.lba(*cylinder, *head, s.where.sector));
      s.lba_inferred = true;
    }
    if (!s.lba) {
      s.user_data.assign(static_cast<size_t>(fmt.user_bytes), 0);
      s.corrected_per_interleave.assign(static_cast<size_t>(fmt.rs.interleave), -1);
      continue;
    }
    const PayloadDecode d = decode_sector_payload(fmt, *s.lba, coded_data[i].bytes, coded_data[i].erased);
    s.user_data = d.user_data;
    s.data_verified = d.verified;
    s.rs_corrected = d.rs_corrected;
    s.corrected_per_interleave = d.corrected_per_interleave;
    s.erasures_used = d.erasures_used;
  }
  return sectors;
}

}  // namespace salvor::format
