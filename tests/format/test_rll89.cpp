// tf1's rate-8/9 (0,4/4) code. Count of qualifying words: 279 (the rule enumerated here by
// brute force and, independently, in tools/format/find_sync.py); the (0,G/I) meaning of
// G and I: Marcus, Siegel & Wolf, IEEE JSAC 10(1), 1992.

#include <gtest/gtest.h>

#include <bit>
#include <random>

#include "format/rll89.hpp"

using namespace salvor::format;

TEST(Rll89, CodebookCount) {
  const Rll89Code& code = rll89_code();
  EXPECT_EQ(code.qualifying_words().size(), 279u);
  EXPECT_TRUE(std::is_sorted(code.qualifying_words().begin(), code.qualifying_words().end()));
  // Brute force against the rule, independently of the table.
  int count = 0;
  for (uint16_t w = 0; w < 512; ++w) count += rll89_word_qualifies(w) ? 1 : 0;
  EXPECT_EQ(count, 279);
  // The smallest and the largest codeword (byte 0x00 and 0xFF), as in SPEC.md.
  EXPECT_EQ(code.encode(0x00), 0x049);
  EXPECT_EQ(code.encode(0xFF), 0x1E4);
}

TEST(Rll89, AllBytesRoundTrip) {
  const Rll89Code& code = rll89_code();
  for (int v = 0; v < 256; ++v) {
    const Rll89Decoded d = code.decode(code.encode(static_cast<uint8_t>(v)));
    EXPECT_FALSE(d.erasure);
    EXPECT_EQ(d.byte, v);
    if (v > 0) {
      EXPECT_LT(code.encode(static_cast<uint8_t>(v - 1)), code.encode(static_cast<uint8_t>(v)));
    }
  }
}

TEST(Rll89, RandomConcatenationsKeepTheConstraint) {
  const Rll89Code& code = rll89_code();
  std::mt19937 rng(5);
  for (int trial = 0; trial < 2000; ++trial) {
    std::vector<uint8_t> bytes(1 + rng() % 64);
    for (auto& b : bytes) b = static_cast<uint8_t>(rng());
    const std::vector<uint8_t> bits = code.encode_bits(bytes);
    ASSERT_LE(longest_zero_run(bits), 4u);        // G = 4
    ASSERT_LE(longest_zero_run(bits, 0, 2), 4u);  // I = 4, even interleave
    ASSERT_LE(longest_zero_run(bits, 1, 2), 4u);  // I = 4, odd interleave
  }
  // The worst cases by construction: all 256 x 256 ordered pairs.
  for (int a = 0; a < 256; ++a) {
    for (int b = 0; b < 256; ++b) {
      const uint8_t pair[2] = {static_cast<uint8_t>(a), static_cast<uint8_t>(b)};
      const std::vector<uint8_t> bits = code.encode_bits(pair);
      ASSERT_LE(longest_zero_run(bits), 4u);
      ASSERT_LE(longest_zero_run(bits, 0, 2), 4u);
      ASSERT_LE(longest_zero_run(bits, 1, 2), 4u);
    }
  }
}

TEST(Rll89, InvalidWordIsAnErasureWithNearestGuess) {
  const Rll89Code& code = rll89_code();
  int invalid = 0;
  for (uint16_t w = 0; w < 512; ++w) {
    const Rll89Decoded d = code.decode(w);
    const bool is_codeword = code.encode(d.byte) == w;
    EXPECT_EQ(d.erasure, !is_codeword) << w;
    if (!is_codeword) {
      ++invalid;
      // Best guess: no codeword is nearer in Hamming distance.
      const int guess = std::popcount(static_cast<unsigned>(w ^ code.encode(d.byte)));
      for (int v = 0; v < 256; ++v) {
        EXPECT_GE(std::popcount(static_cast<unsigned>(w ^ code.encode(static_cast<uint8_t>(v)))), guess);
      }
    }
  }
  EXPECT_EQ(invalid, 256);
  EXPECT_TRUE(code.decode(0x000).erasure);  // all zeros breaks G
  std::vector<uint8_t> bits(18, 0), bytes(2), flags(2);
  const std::vector<uint8_t> good = code.encode_bits(std::vector<uint8_t>{0x5A});
  std::copy(good.begin(), good.end(), bits.begin() + 9);
  EXPECT_EQ(code.decode_bits(bits, bytes, flags), 1);
  EXPECT_EQ(flags[0], 1);
  EXPECT_EQ(flags[1], 0);
  EXPECT_EQ(bytes[1], 0x5A);
}
