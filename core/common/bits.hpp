#pragma once
// Bit counts for the per-bit paths (sync search, descrambler). std::popcount compiles to
// a library call on x86-64 without the POPCNT extension, which salvor's baseline build
// does not assume; these are a dozen plain instructions, inlined.

#include <cstdint>

namespace salvor {

inline int popcount64(uint64_t v) {
  // Sideways addition (the classic SWAR count: pairs, nibbles, then bytes by a multiply).
  v = v - ((v >> 1) & 0x5555555555555555ull);
  v = (v & 0x3333333333333333ull) + ((v >> 2) & 0x3333333333333333ull);
  v = (v + (v >> 4)) & 0x0F0F0F0F0F0F0F0Full;
  return static_cast<int>((v * 0x0101010101010101ull) >> 56);
}

inline int parity32(uint32_t v) {
  v ^= v >> 16;
  v ^= v >> 8;
  v ^= v >> 4;
  return (0x6996u >> (v & 0xFu)) & 1;  // the parities of 0..15, one bit each
}

}  // namespace salvor
