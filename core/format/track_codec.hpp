#pragma once
// The reference encoder and the bit-exact parser of the track format. The encoder turns an
// image into the channel bits of each track; the parser turns a noiseless channel bit
// stream back into sectors. The decoder of the later pipeline is held to these two.

#include <cstddef>
#include <cstdint>
#include <optional>
#include <span>
#include <vector>

#include "format/track_format.hpp"

namespace salvor::format {

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
TrackLayout layout_track(const TrackFormat& fmt);

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

// Pieces of the sector encoder, exposed for the decoder and tests.
std::vector<uint8_t> encode_header_bytes(const TrackFormat& fmt, const SectorHeader& h);   // with CRC
std::optional<SectorHeader> decode_header_bytes(const TrackFormat& fmt,
                                                std::span<const uint8_t> bytes);          // nullopt: CRC fails
// user data -> the coded bytes on the medium (CRC-32, scramble, RS, interleave), coded_bytes long.
std::vector<uint8_t> encode_sector_payload(const TrackFormat& fmt, uint32_t lba,
                                           std::span<const uint8_t> user_data);

struct ParsedSector {
  SectorPlacement where;          // found position (from the sync mark)
  std::optional<SectorHeader> header;  // nullopt when the header CRC fails
  std::vector<uint8_t> user_data; // user_bytes, after ECC and descrambling
  bool data_verified = false;     // CRC-32 checks after RS decoding
  int rs_corrected = 0;           // symbols corrected, all interleaves
};

// Bit-exact parser for a noiseless (or lightly damaged) channel bit stream of one track:
// finds sync marks within the tolerance, reads headers and data.
std::vector<ParsedSector> parse_track(const TrackFormat& fmt, std::span<const uint8_t> channel_bits);

}  // namespace salvor::format
