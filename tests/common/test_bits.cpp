#include <gtest/gtest.h>

#include <bit>
#include <random>

#include "common/bits.hpp"

// The inlined bit counts against the standard library's (the reference definition).
TEST(Bits, PopcountAndParityEqualTheStandardLibrary) {
  std::mt19937_64 rng(11);
  for (uint64_t v : {0ull, 1ull, ~0ull, 0x8000000000000000ull, 0x5555555555555555ull}) {
    EXPECT_EQ(salvor::popcount64(v), std::popcount(v)) << v;
  }
  for (int i = 0; i < 100000; ++i) {
    const uint64_t v = rng();
    ASSERT_EQ(salvor::popcount64(v), std::popcount(v)) << v;
    const uint32_t w = static_cast<uint32_t>(v);
    ASSERT_EQ(salvor::parity32(w), std::popcount(w) & 1) << w;
  }
}
