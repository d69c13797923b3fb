// PRBS15 scrambler tests: hand-derived first bits and the period of a primitive polynomial
// (x^15 + x^14 + 1 is the ITU-T O.150 2^15-1 sequence polynomial, period 32767).

#include <gtest/gtest.h>

#include <random>

#include "common/error.hpp"
#include "format/scrambler.hpp"

using namespace salvor::format;

TEST(Scrambler, FirstBitsSeedOne) {
  // Hand derivation, a_k = a_{k-14} xor a_{k-15}, seed 1: a_{-1} = 1, a_{-2..-15} = 0.
  //   a_0..a_12 = 0 (both taps reach zeros); a_13 = a_{-1} xor a_{-2} = 1; a_14 = a_0 xor a_{-1} = 1;
  //   a_15 = a_1 xor a_0 = 0; a_16..a_26 = 0; a_27 = a_13 xor a_12 = 1; a_28 = a_14 xor a_13 = 0;
  //   a_29 = a_15 xor a_14 = 1; a_30 = a_31 = 0.
  // Bytes, MSB first: 00000000 00000110 00000000 00010100 = 00 06 00 14.
  Scrambler s({15, 0x6000, 1});
  EXPECT_EQ(s.next_byte(), 0x00);
  EXPECT_EQ(s.next_byte(), 0x06);
  EXPECT_EQ(s.next_byte(), 0x00);
  EXPECT_EQ(s.next_byte(), 0x14);
}

TEST(Scrambler, FirstBitsAllOnesSeed) {
  // Seed 0x7FFF (all ones): a_k = 1 xor 1 = 0 for k = 0..13 (taps 14 and 15 both in the
  // seed); a_14 = a_0 xor a_{-1} = 1; a_15 = a_1 xor a_0 = 0. First two bytes: 00 02.
  Scrambler s({15, 0x6000, 0x7FFF});
  EXPECT_EQ(s.next_byte(), 0x00);
  EXPECT_EQ(s.next_byte(), 0x02);
}

TEST(Scrambler, PeriodIsMaximal) {
  // Primitive polynomial of degree 15: period 2^15 - 1 from every nonzero seed.
  for (uint32_t seed : {1u, 2u, 12345u, 0x7FFFu}) {
    EXPECT_EQ(scrambler_period({15, 0x6000, seed}, 40000), 32767u) << seed;
  }
  // A reducible polynomial has a shorter period: x^4 + x^2 + 1 = (x^2 + x + 1)^2, whose
  // sequences from seed 1 repeat after 6 bits (a_k = a_{k-2} xor a_{k-4}: 1,0,1,1,0,0 ... by hand).
  EXPECT_EQ(scrambler_period({4, 0b1010, 1}, 100), 6u);
}

TEST(Scrambler, ByteAtOnceEqualsBitByBit) {
  // next_byte() takes eight bits at once when no tap is nearer than a_{k-8}; it must give
  // the register's own bit sequence (next_bit, MSB first), for several polynomials on both
  // sides of that rule (x^7 + x^4 + 1 has the tap a_{k-4}: the step-by-step path).
  struct Poly { int degree; uint32_t taps; };
  for (Poly p : {Poly{15, 0x6000}, Poly{31, 0x48000000}, Poly{9, 0x110}, Poly{7, 0x48}, Poly{4, 0b1100}}) {
    for (uint32_t seed : {1u, 5u, (1u << p.degree) - 1}) {
      Scrambler bytes({p.degree, p.taps, seed}), bits({p.degree, p.taps, seed});
      for (int k = 0; k < 300; ++k) {
        uint8_t want = 0;
        for (int i = 0; i < 8; ++i) want = static_cast<uint8_t>((want << 1) | bits.next_bit());
        ASSERT_EQ(bytes.next_byte(), want) << "degree " << p.degree << " seed " << seed << " byte " << k;
        ASSERT_EQ(bytes.state(), bits.state());
      }
    }
  }
}

TEST(Scrambler, SeedRuleAndRoundTrip) {
  EXPECT_EQ(scrambler_seed_for_lba(0, 15), 1u);
  EXPECT_EQ(scrambler_seed_for_lba(32766, 15), 32767u);
  EXPECT_EQ(scrambler_seed_for_lba(32767, 15), 1u);  // never zero
  std::mt19937 rng(3);
  std::vector<uint8_t> data(516), copy;
  for (auto& b : data) b = static_cast<uint8_t>(rng());
  copy = data;
  Scrambler a({15, 0x6000, 77});
  a.apply(copy);
  EXPECT_NE(copy, data);
  a.reset();
  a.apply(copy);
  EXPECT_EQ(copy, data);
}

TEST(Scrambler, PolynomialText) {
  int degree = 0;
  uint32_t taps = 0;
  parse_scrambler_polynomial("x^15+x^14+1", "f", "k", degree, taps);
  EXPECT_EQ(degree, 15);
  EXPECT_EQ(taps, 0x6000u);
  parse_scrambler_polynomial(" X^7 + x^4 + 1 ", "f", "k", degree, taps);
  EXPECT_EQ(degree, 7);
  EXPECT_EQ(taps, 0x48u);
  EXPECT_THROW(parse_scrambler_polynomial("x^15+x^14", "f", "k", degree, taps), salvor::Error);
  EXPECT_THROW(parse_scrambler_polynomial("x^15+y+1", "f", "k", degree, taps), salvor::Error);
  EXPECT_THROW(parse_scrambler_polynomial("x^15+x^15+1", "f", "k", degree, taps), salvor::Error);
  EXPECT_THROW(Scrambler({15, 0x6000, 0}), salvor::Error);
}
