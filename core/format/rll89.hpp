#pragma once
// tf1's rate-8/9 (0, G=4 / I=4) block code, a code of our own in the family of PRML
// (0,G/I) codes (constraint semantics: B. H. Marcus, P. H. Siegel & J. K. Wolf,
// "Finite-state modulation codes for data storage", IEEE JSAC 10(1), 1992):
//   G = longest run of channel 0s, I = longest run of 0s in each of the even and odd
//   interleaves. The codebook is the 256 numerically smallest 9-bit words (bit 8 sent
//   first) whose zero runs are <= 4 and that have <= 2 leading and <= 2 trailing zeros,
//   overall and in each interleave; byte v maps to the v-th of them in ascending order.
//   279 words qualify; the 23 largest are unused. Any concatenation keeps G <= 4, I <= 4.
// A 9-bit word outside the codebook decodes to an erasure flag plus a best guess (the
// codeword nearest in Hamming distance, the smallest byte on a tie).

#include <array>
#include <cstddef>
#include <cstdint>
#include <span>
#include <vector>

namespace salvor::format {

struct Rll89Decoded {
  uint8_t byte = 0;      // the byte (best guess when `erasure`)
  bool erasure = false;  // the word was not a codeword
};

class Rll89Code {
 public:
  Rll89Code();  // builds the tables (pure computation, cannot fail)

  static constexpr int kWordBits = 9;
  static constexpr int kMaxZeroRun = 4;     // G and I
  static constexpr int kMaxEdgeZeros = 2;   // leading / trailing, overall and per interleave

  uint16_t encode(uint8_t byte) const { return encode_[byte]; }
  Rll89Decoded decode(uint16_t word) const { return decode_[word & 0x1FF]; }

  // Bytes -> channel bits (one 0/1 value per element), 9 per byte, first bit first.
  void encode_bits(std::span<const uint8_t> bytes, std::span<uint8_t> bits) const;
  std::vector<uint8_t> encode_bits(std::span<const uint8_t> bytes) const;
  // Channel bits (9 per byte) -> bytes and per-byte erasure flags. Returns the number of
  // erasures. bits.size() must be 9 * bytes.size().
  int decode_bits(std::span<const uint8_t> bits, std::span<uint8_t> bytes,
                  std::span<uint8_t> erasures) const;

  // The qualifying 9-bit words in ascending order (279 of them); the first 256 are the codebook.
  const std::vector<uint16_t>& qualifying_words() const { return qualifying_; }

 private:
  std::vector<uint16_t> qualifying_;
  std::array<uint16_t, 256> encode_{};
  std::array<Rll89Decoded, 512> decode_{};
};

// The one (immutable) instance, built on first use.
const Rll89Code& rll89_code();

// True when a 9-bit word meets the codebook rule above.
bool rll89_word_qualifies(uint16_t word);

// Longest run of zeros in a 0/1 sequence, overall (step 1) or in one interleave
// (start 0 or 1, step 2).
size_t longest_zero_run(std::span<const uint8_t> bits, size_t start = 0, size_t step = 1);

}  // namespace salvor::format
