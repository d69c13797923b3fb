#pragma once
// A drive family's track format, as read from a TOML descriptor (corpora/formats/*.toml,
// specified in corpora/formats/SPEC.md). Plain data: every stage that needs to know the
// layout of a track reads it from here. load_track_format() validates everything and
// refuses a descriptor that does not fit together, naming the file and the key.

#include <cstddef>
#include <cstdint>
#include <filesystem>
#include <string>
#include <vector>

namespace salvor::format {

// Rocksoft-model CRC parameters (names as in the published CRC catalogue).
struct CrcParams {
  std::string name;      // catalogue name, e.g. "CRC-16/IBM-3740"
  int width = 0;         // 8..32
  uint32_t poly = 0;     // normal (MSB-first) form, without the top bit
  uint32_t init = 0;
  bool refin = false;
  bool refout = false;
  uint32_t xorout = 0;
};

// Reed–Solomon over GF(2^8) in the usual (libfec-compatible) parameterisation:
// generator roots alpha^(prim*(fcr+i)), i = 0..parity_symbols-1.
struct ReedSolomonParams {
  unsigned field_polynomial = 0x11D;  // must be primitive (checked at load)
  int first_root = 0;                 // fcr
  int primitive_element = 1;          // prim: the root step, coprime to 255
  int parity_symbols = 16;            // n - k per interleave
  int interleave = 3;                 // codewords per sector (byte j -> codeword j % interleave)
};

// Optional embedded servo wedges: they interrupt the track at fixed positions and are
// skipped by the decoder. Sectors never straddle a wedge (see SPEC.md, "Track layout").
struct ServoParams {
  int wedges_per_track = 0;  // 0 = no servo wedges
  int wedge_bits = 0;        // channel bits per wedge
  int preamble_bits = 0;               // servo preamble at the start of a wedge
  std::vector<uint8_t> preamble_pattern;  // channel bits repeated from the wedge start (3T: 0,0,1)
  std::vector<uint8_t> mark;           // servo mark, channel bits, first transmitted first
  std::vector<uint8_t> fill_pattern;   // after the wedge index and cylinder, to the wedge end
};

struct TrackFormat {
  std::string name;                     // e.g. "tf1-512"
  std::filesystem::path source;         // descriptor file it came from (for messages)
  int version = 1;
  std::string description;              // free text from [format]

  // Channel
  double bit_rate_hz = 0;               // nominal channel bit rate
  std::string precoder = "nrzi";        // 1/(1 xor D): a channel 1 is a write-current reversal
  int initial_level = -1;               // write level before bit 0 of a track (-1 or +1)

  // Geometry (no zones: every track has the same layout)
  int heads = 0;
  int cylinders = 0;
  int sectors_per_track = 0;
  size_t bits_per_track = 0;            // channel bits in one revolution, from the index

  // Fields, in channel bits
  int lead_in_bits = 0;                 // from the index to the first field
  int preamble_bits = 0;                // 2T pattern: NRZ levels 1100..., channel bits 0101...
  std::vector<uint8_t> sync_mark;       // channel bits, 0/1, first transmitted first
  int sync_tolerance = 0;               // Hamming distance accepted when searching
  int postamble_bits = 0;
  int gap_bits = 0;                     // between the postamble of one sector and the next preamble
  std::vector<uint8_t> preamble_pattern;   // channel bits repeated from the preamble start ({0,1})
  std::vector<uint8_t> postamble_pattern;  // repeated from the postamble start ({0,1})
  std::vector<uint8_t> gap_pattern;        // repeated from bit 0 of the track ({0,0,0,1})

  // Header
  CrcParams header_crc;                 // over the header bytes before the CRC

  // Data
  int user_bytes = 512;                 // 512 or 4096
  CrcParams data_crc;                   // CRC-32 over the user data, appended little-endian
  std::string scrambler;                // e.g. "x^15+x^14+1"
  uint32_t scrambler_taps = 0;          // feedback taps as a bit mask (bit i-1 = x^i)
  int scrambler_degree = 0;
  ReedSolomonParams rs;
  std::string modulation = "rll-8/9-0-4-4";  // see SPEC.md

  ServoParams servo;

  // Derived sizes (filled by load_track_format)
  int header_bytes = 0;                 // header bytes including the CRC
  int payload_bytes = 0;                // user_bytes + 4 (CRC-32)
  int codeword_data_bytes = 0;          // payload_bytes / interleave
  int codeword_bytes = 0;               // codeword_data_bytes + parity_symbols
  int coded_bytes = 0;                  // codeword_bytes * interleave (bytes on the medium)
  int data_crc_bytes = 0;               // data_crc.width / 8
  int header_bits = 0;                  // header_bytes * 9
  int data_bits = 0;                    // coded_bytes * 9
  int sector_bits = 0;                  // preamble .. postamble, channel bits

  // LBA of a sector: (cylinder * heads + head) * sectors_per_track + sector.
  uint64_t lba(int cylinder, int head, int sector) const;
  uint64_t total_sectors() const;
  uint64_t image_bytes() const { return total_sectors() * static_cast<uint64_t>(user_bytes); }
};

// Reads and validates a descriptor. Throws salvor::Error (input) naming the file and the
// key on any problem: missing keys, out-of-range values, a non-primitive RS polynomial,
// sizes that do not fit together, a track too short for its sectors.
TrackFormat load_track_format(const std::filesystem::path& path);

// Same, from TOML text (for tests); `origin` is used in messages.
TrackFormat parse_track_format(const std::string& toml_text, const std::string& origin);

// Finds a descriptor by name ("tf1-512") in corpora/formats of the source tree or the
// install tree, or accepts a path.
std::filesystem::path find_track_format(const std::string& name_or_path);

}  // namespace salvor::format
