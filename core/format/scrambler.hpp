#pragma once
// Additive (synchronous) scrambler driven by a Fibonacci linear feedback shift register,
// the randomizer kind used for sector data because it adds no error propagation (each
// channel error stays one error after descrambling); ITU-T O.150 names x^15+x^14+1 as
// the 2^15-1 pseudo-random binary sequence. Bit conventions (SPEC.md, "Scrambler"):
//   the sequence obeys a_k = XOR over taps i of a_{k-i};
//   state bit (i-1) holds a_{k-i}, so the seed is the state before a_0;
//   a_0, a_1, ... are XORed into the data bytes most significant bit first.
// Scrambling and descrambling are the same operation.

#include <cstddef>
#include <cstdint>
#include <span>
#include <string>

namespace salvor::format {

struct ScramblerConfig {
  int degree = 15;             // register length L, 2..31
  uint32_t taps = 0x6000;      // bit (i-1) set = a_{k-i} is fed back (x^15 + x^14 + 1)
  uint32_t seed = 1;           // initial state, nonzero, below 2^degree
};

class Scrambler {
 public:
  explicit Scrambler(const ScramblerConfig& config);  // throws salvor::Error(usage)

  int next_bit();                 // the next sequence bit a_k (0/1)
  uint8_t next_byte();            // eight sequence bits, the first one in the MSB
  // XORs the sequence into `bytes` in place (scramble = descramble).
  void apply(std::span<uint8_t> bytes);

  void reset();                   // back to the seed
  uint32_t state() const { return state_; }
  std::string describe() const;

 private:
  ScramblerConfig config_;
  uint32_t mask_ = 0;
  uint32_t state_ = 0;
};

// tf1's seed rule: 1 + (lba mod (2^degree - 1)), never zero.
uint32_t scrambler_seed_for_lba(uint64_t lba, int degree);

// Parses "x^15+x^14+1" into degree and taps; throws salvor::Error(input) with `where`
// (a file) and `key` (put in front of the message).
void parse_scrambler_polynomial(const std::string& text, const std::string& where, const std::string& key,
                                int& degree, uint32_t& taps);

// Number of steps until the state returns to `seed` (the period); stops after `limit`
// steps and returns 0 when it did not return.
uint64_t scrambler_period(const ScramblerConfig& config, uint64_t limit);

}  // namespace salvor::format
