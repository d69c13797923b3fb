// tf1's rate-8/9 (0,4/4) block code (rule and literature in rll89.hpp).

#include "format/rll89.hpp"

#include <bit>

#include "common/error.hpp"

namespace salvor::format {

namespace {

struct RunStats {
  int longest = 0, leading = 0, trailing = 0;
};

// Zero-run statistics of the word's bits at transmission positions start, start+2, ...
// (position 0 = bit 8, sent first).
RunStats run_stats(uint16_t word, int start, int step) {
  RunStats st;
  int run = 0;
  bool seen_one = false;
  for (int t = start; t < 9; t += step) {
    const int bit = (word >> (8 - t)) & 1;
    if (bit) {
      if (!seen_one) st.leading = run;
      seen_one = true;
      run = 0;
    } else {
      ++run;
      if (run > st.longest) st.longest = run;
    }
  }
  if (!seen_one) st.leading = run;
  st.trailing = run;
  return st;
}

}  // namespace

bool rll89_word_qualifies(uint16_t word) {
  if (word > 0x1FF) return false;
  const RunStats views[3] = {run_stats(word, 0, 1), run_stats(word, 0, 2), run_stats(word, 1, 2)};
  for (const RunStats& st : views) {
    if (st.longest > Rll89Code::kMaxZeroRun || st.leading > Rll89Code::kMaxEdgeZeros ||
        st.trailing > Rll89Code::kMaxEdgeZeros) {
      return false;
    }
  }
  return true;
}

Rll89Code::Rll89Code() {
  for (uint16_t w = 0; w < 512; ++w) {
    if (rll89_word_qualifies(w)) qualifying_.push_back(w);
  }
  if (qualifying_.size() < 256) throw_internal("8/9 codebook has fewer than 256 words");
  std::array<int, 512> byte_of{};
  byte_of.fill(-1);
  for (int v = 0; v < 256; ++v) {
    encode_[v] = qualifying_[v];
    byte_of[qualifying_[v]] = v;
  }
  for (int w = 0; w < 512; ++w) {
    if (byte_of[w] >= 0) {
      decode_[w] = {static_cast<uint8_t>(byte_of[w]), false};
      continue;
    }
    int best = 0, best_distance = 10;
    for (int v = 0; v < 256; ++v) {
      const int d = std::popcount(static_cast<unsigned>(w ^ encode_[v]));
      if (d < best_distance) {
        best_distance = d;
        best = v;
      }
    }
    decode_[w] = {static_cast<uint8_t>(best), true};
  }
}

void Rll89Code::encode_bits(std::span<const uint8_t> bytes, std::span<uint8_t> bits) const {
  if (bits.size() != bytes.size() * kWordBits) throw_internal("8/9 encode: wrong buffer size");
  size_t o = 0;
  for (uint8_t b : bytes) {
    const uint16_t w = encode_[b];
    for (int t = 0; t < kWordBits; ++t) bits[o++] = static_cast<uint8_t>((w >> (8 - t)) & 1);
  }
}

std::vector<uint8_t> Rll89Code::encode_bits(std::span<const uint8_t> bytes) const {
  std::vector<uint8_t> bits(bytes.size() * kWordBits);
  encode_bits(bytes, bits);
  return bits;
}

int Rll89Code::decode_bits(std::span<const uint8_t> bits, std::span<uint8_t> bytes,
                           std::span<uint8_t> erasures) const {
  if (bits.size() != bytes.size() * kWordBits || erasures.size() != bytes.size()) {
    throw_internal("8/9 decode: wrong buffer sizes");
  }
  int count = 0;
  for (size_t i = 0; i < bytes.size(); ++i) {
    uint16_t w = 0;
    for (int t = 0; t < kWordBits; ++t) w = static_cast<uint16_t>((w << 1) | (bits[i * kWordBits + t] & 1));
    const Rll89Decoded d = decode_[w];
    bytes[i] = d.byte;
    erasures[i] = d.erasure ? 1 : 0;
    count += d.erasure ? 1 : 0;
  }
  return count;
}

size_t longest_zero_run(std::span<const uint8_t> bits, size_t start, size_t step) {
  size_t best = 0, run = 0;
  for (size_t i = start; i < bits.size(); i += step) {
    if (bits[i]) {
      run = 0;
    } else if (++run > best) {
      best = run;
    }
  }
  return best;
}

}  // namespace salvor::format

namespace salvor::format {
const Rll89Code& rll89_code() {
  static const Rll89Code code;  // immutable after construction (thread-safe initialisation)
  return code;
}
}  // namespace salvor::format
