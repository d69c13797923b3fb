// Fibonacci LFSR scrambler (see scrambler.hpp for the bit conventions and sources).

#include "format/scrambler.hpp"

#include <bit>
#include <cctype>
#include <cstdio>

#include "common/bits.hpp"
#include "common/error.hpp"

namespace salvor::format {

Scrambler::Scrambler(const ScramblerConfig& config) : config_(config) {
  if (config.degree < 2 || config.degree > 31) {
    throw_usage("scrambler", "degree " + std::to_string(config.degree) + " is outside 2..31");
  }
  mask_ = (1u << config.degree) - 1;
  if ((config.taps & ~mask_) || !(config.taps & (1u << (config.degree - 1)))) {
    throw_usage("scrambler", "taps must include x^degree and stay below it");
  }
  if (config.seed == 0 || (config.seed & ~mask_)) {
    throw_usage("scrambler", "seed " + std::to_string(config.seed) + " must be in 1.." +
                                 std::to_string(mask_));
  }
  state_ = config.seed;
}

int Scrambler::next_bit() {
  const int bit = parity32(state_ & config_.taps);
  state_ = ((state_ << 1) | static_cast<uint32_t>(bit)) & mask_;
  return bit;
}

uint8_t Scrambler::next_byte() {
  // When no feedback tap is nearer than a_{k-8} (taps clear below bit 7), the eight bits
  // depend only on the state before them: bit j is the parity of (state << j) & taps, as
  // the bits shifted in meanwhile sit below every tap. Eight independent parities instead
  // of a chain of eight register steps.
  if ((config_.taps & 0x7Fu) == 0) {
    uint32_t b = 0;
    for (int j = 0; j < 8; ++j) b |= static_cast<uint32_t>(parity32((state_ << j) & config_.taps)) << (7 - j);
    state_ = ((state_ << 8) | b) & mask_;
    return static_cast<uint8_t>(b);
  }
  uint8_t b = 0;
  for (int i = 0; i < 8; ++i) b = static_cast<uint8_t>((b << 1) | next_bit());
  return b;
}

void Scrambler::apply(std::span<uint8_t> bytes) {
  for (uint8_t& b : bytes) b ^= next_byte();
}

void Scrambler::reset() { state_ = config_.seed; }

std::string Scrambler::describe() const {
  char buf[96];
  std::snprintf(buf, sizeof buf, "additive LFSR scrambler: degree %d, taps 0x%X, seed 0x%X",
                config_.degree, config_.taps, config_.seed);
  return buf;
}

uint32_t scrambler_seed_for_lba(uint64_t lba, int degree) {
  const uint64_t period = (uint64_t{1} << degree) - 1;
  return static_cast<uint32_t>(1 + lba % period);
}

void parse_scrambler_polynomial(const std::string& text, const std::string& where, const std::string& key,
                                int& degree, uint32_t& taps) {
  std::string s;
  for (char c : text) {
    if (!std::isspace(static_cast<unsigned char>(c))) s += static_cast<char>(std::tolower(c));
  }
  auto bad = [&](const std::string& why) {
    throw_input(where, (key.empty() ? std::string() : key + ": ") + "polynomial \"" + text + "\" " + why + " (expected e.g. \"x^15+x^14+1\")");
  };
  if (s.empty()) bad("is empty");
  bool has_one = false;
  int max_exp = 0;
  uint64_t exps = 0;
  size_t pos = 0;
  while (pos <= s.size()) {
    size_t plus = s.find('+', pos);
    if (plus == std::string::npos) plus = s.size();
    const std::string term = s.substr(pos, plus - pos);
    int e = -1;
    if (term == "1") {
      e = 0;
    } else if (term == "x") {
      e = 1;
    } else if (term.size() > 2 && term[0] == 'x' && term[1] == '^') {
      const std::string num = term.substr(2);
      if (num.empty() || num.size() > 2) bad("has a bad term \"" + term + "\"");
      for (char c : num) {
        if (!std::isdigit(static_cast<unsigned char>(c))) bad("has a bad term \"" + term + "\"");
      }
      e = std::stoi(num);
    } else {
      bad("has a bad term \"" + term + "\"");
    }
    if (e > 31) bad("has degree above 31");
    if (exps & (uint64_t{1} << e)) bad("repeats the term \"" + term + "\"");
    exps |= uint64_t{1} << e;
    if (e == 0) has_one = true;
    if (e > max_exp) max_exp = e;
    pos = plus + 1;
  }
  if (!has_one) bad("lacks the constant term 1");
  if (max_exp < 2) bad("has degree below 2");
  degree = max_exp;
  taps = 0;
  for (int e = 1; e <= max_exp; ++e) {
    if (exps & (uint64_t{1} << e)) taps |= 1u << (e - 1);
  }
}

uint64_t scrambler_period(const ScramblerConfig& config, uint64_t limit) {
  Scrambler s(config);
  for (uint64_t n = 1; n <= limit; ++n) {
    s.next_bit();
    if (s.state() == config.seed) return n;
  }
  return 0;
}

}  // namespace salvor::format
