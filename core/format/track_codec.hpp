#pragma once
// The reference encoder and the bit-exact parser of the track format. The encoder turns an
// image into the channel bits of each track; the parser turns a noiseless channel bit
// stream back into sectors. The decoder of the later pipeline is held to these two.

#include <cstddef>
#include <cstdint>
#include <optional>
#include <span>
#include <string>
#include <vector>

#include "format/reed_solomon.hpp"
#include "format/sync_search.hpp"
#include "format/track_format.hpp"

namespace salvor::format {

inline constexpr int kHeaderFieldBytes = 10;     // LBA 4, cylinder 2, head, sector, flags, version
inline constexpr int kServoFieldBytes = 3;       // wedge index, Gray-coded cylinder (2, big-endian)
inline constexpr uint8_t kHeaderFlagRelocated = 0x01;  // flags bit 0; the other bits are 0 in tf1

// Where each field of one sector sits on the track, in channel bits from the index.
struct SectorPlacement {
  int sector = 0;             // sector-in-track
  size_t preamble_bit = 0;    // first bit of the preamble
  size_t sync_bit = 0;        // first bit of the sync mark
  size_t header_bit = 0;      // first bit of the header
  size_t data_bit = 0;        // first bit of the coded data
  size_t end_bit = 0;         // one past the last bit of the postamble
};

struct ServoPlacement {
  int wedge = 0;
  size_t start_bit = 0;
  size_t end_bit = 0;  // one past
};

struct TrackLayout {
  std::vector<SectorPlacement> sectors;
  std::vector<ServoPlacement> wedges;
};

// The nominal layout of every track of this format (the same for all tracks).
// Throws salvor::Error(input) when the sectors do not fit (load_track_format refuses such
// a descriptor already).
TrackLayout layout_track(const TrackFormat& fmt);

// The same computation without throwing: whether the sectors fit, and if not why and the
// shortest bits_per_track longer than the present one that holds them (0 when none is
// found within 2^16 bits more).
struct LayoutCheck {
  bool fits = false;
  std::string problem;          // "geometry.bits_per_track: ..." when !fits
  size_t minimum_bits_per_track = 0;
  TrackLayout layout;           // valid when fits
};
LayoutCheck check_track_layout(const TrackFormat& fmt);

struct SectorHeader {
  uint32_t lba = 0;
  uint16_t cylinder = 0;
  uint8_t head = 0;
  uint8_t sector = 0;
  uint8_t flags = 0;
};

// Channel bits (NRZI domain, one bit per byte, values 0/1) of one whole track, exactly
// bits_per_track long. `image` must hold image_bytes(); the sectors of this track are
// read at their LBA.
std::vector<uint8_t> encode_track(const TrackFormat& fmt, std::span<const uint8_t> image,
                                  int cylinder, int head);

// The written magnetisation levels (+1/-1) for channel bits under the NRZI precoder,
// starting from `initial_level` (the level before bit 0).
std::vector<int8_t> nrzi_levels(std::span<const uint8_t> channel_bits, int8_t initial_level = -1);

// Gray code of a cylinder number (c xor c>>1), as written in the servo wedges.
inline uint16_t gray_code(uint16_t c) { return static_cast<uint16_t>(c ^ (c >> 1)); }
// Channel bits of servo wedge `wedge` on a track of `cylinder` (wedge_bits long).
std::vector<uint8_t> encode_servo_wedge(const TrackFormat& fmt, int wedge, int cylinder);
// Channel bits of one sector, preamble to postamble (sector_bits long).
std::vector<uint8_t> encode_sector_bits(const TrackFormat& fmt, const SectorHeader& h,
                                        std::span<const uint8_t> user_data);

// Pieces of the sector encoder, exposed for the decoder and tests.
std::vector<uint8_t> encode_header_bytes(const TrackFormat& fmt, const SectorHeader& h);   // with CRC
std::optional<SectorHeader> decode_header_bytes(const TrackFormat& fmt,
                                                std::span<const uint8_t> bytes);          // nullopt: CRC fails
// user data -> the coded bytes on the medium (CRC-32, scramble, RS, interleave), coded_bytes long.
std::vector<uint8_t> encode_sector_payload(const TrackFormat& fmt, uint32_t lba,
                                           std::span<const uint8_t> user_data);
// The header of sector `sector` of track (cylinder, head), flags 0.
SectorHeader make_sector_header(const TrackFormat& fmt, int cylinder, int head, int sector);

// The inverse of encode_sector_payload: coded bytes (coded_bytes long, as on the medium)
// and optional per-byte erasure flags (empty, or coded_bytes long, nonzero = erased, e.g.
// from the 8/9 decoder or low detector reliability). Never throws on bad data.
struct PayloadDecode {
  std::vector<uint8_t> user_data;      // user_bytes: corrected, descrambled (best guess if !verified)
  bool verified = false;               // every codeword decoded and the CRC-32 checks
  bool crc_ok = false;                 // the CRC over the result checks
  int rs_corrected = 0;                // symbols changed by RS over all interleaves
  std::vector<int> corrected_per_interleave;  // per codeword; -1 = that codeword failed
  int erasures_used = 0;               // erasure positions passed to the RS decoder
  int rs_failures = 0;                 // codewords the RS decoder could not correct
};
PayloadDecode decode_sector_payload(const TrackFormat& fmt, uint32_t lba, std::span<const uint8_t> coded,
                                    std::span<const uint8_t> erasure_flags = {});
// The same with the format's Reed-Solomon code built by the caller (make_sector_rs), for
// callers that decode many sectors or try many erasure sets: building the code's tables
// costs more than decoding one sector.
ReedSolomon make_sector_rs(const TrackFormat& fmt);
PayloadDecode decode_sector_payload(const TrackFormat& fmt, const ReedSolomon& rs, uint32_t lba,
                                    std::span<const uint8_t> coded, std::span<const uint8_t> erasure_flags = {});

struct ParsedSector {
  SectorPlacement where;          // found position (from the sync mark)
  std::optional<SectorHeader> header;  // nullopt when the header CRC fails
  std::vector<uint8_t> user_data; // user_bytes, after ECC and descrambling
  bool data_verified = false;     // CRC-32 checks after RS decoding
  int rs_corrected = 0;           // symbols corrected, all interleaves
  int sync_distance = 0;          // Hamming distance of the sync mark found
  std::vector<int> corrected_per_interleave;  // -1 = that codeword failed
  int erasures_used = 0;          // 8/9 invalid words given to RS as erasures
  int header_erasures = 0;        // 8/9 invalid words in the header
  bool truncated = false;         // the stream ended inside the sector (missing bytes erased)
  std::optional<uint32_t> lba;    // LBA used to descramble: the header's, else inferred
  bool lba_inferred = false;      // from the layout position and the track's cylinder/head
};

struct ParseOptions {
  // The track's cylinder and head when known (capture sidecar); used to infer the LBA of
  // a sector whose header fails. Without them, the first verified header of the track is used.
  std::optional<int> cylinder;
  std::optional<int> head;
  // Skip the servo wedge spans of the nominal layout when searching (the stream starts at
  // the index, as encode_track's does).
  bool skip_servo_wedges = true;
};

// Bit-exact parser for a noiseless (or lightly damaged) channel bit stream of one track:
// finds sync marks within the tolerance, reads headers and data.
std::vector<ParsedSector> parse_track(const TrackFormat& fmt, std::span<const uint8_t> channel_bits);
std::vector<ParsedSector> parse_track(const TrackFormat& fmt, std::span<const uint8_t> channel_bits,
                                      const ParseOptions& options);

}  // namespace salvor::format
