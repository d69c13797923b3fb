#pragma once
// Sync-mark search on detected channel bits with a Hamming tolerance. Keeps the last n
// bits in a shift register and reports every position where popcount(register xor mark)
// <= tolerance; of a cluster of hits within one mark length it keeps the one with the
// smallest distance (the true alignment beats its shifted neighbours). Streaming: bits
// arrive in blocks of any size; positions are absolute bit indices since reset().
//
// False-alarm rate per position in random data: sum_{i<=E} C(n,i) / 2^n (for n = 32,
// E = 4: 9.7e-6), which is why the search is restricted to windows where the layout
// expects a sector (see SectorFramer).

#include <cstddef>
#include <cstdint>
#include <span>
#include <string>
#include <vector>

#include "common/stream.hpp"

namespace salvor::frame {

struct SyncHit {
  uint64_t end_bit = 0;  // index of the bit after the mark's last bit
  int distance = 0;      // Hamming distance to the mark
};

struct SyncSearchConfig {
  std::vector<uint8_t> mark;  // channel bits 0/1, 8..64 long
  int tolerance = 0;          // accepted Hamming distance, < mark length / 2
};

class SyncSearch {
 public:
  explicit SyncSearch(const SyncSearchConfig& config);  // throws salvor::Error(usage)

  // Consumes all `bits`; appends confirmed hits to `hits` (a hit is confirmed once a
  // mark length has passed without a better one).
  void process(std::span<const uint8_t> bits, std::vector<SyncHit>& hits);
  // Emits a pending hit at the end of a span.
  void flush(std::vector<SyncHit>& hits);
  void reset();
  std::string describe() const;

  size_t mark_length() const { return config_.mark.size(); }

 private:
  SyncSearchConfig config_;
  uint64_t mark_bits_ = 0;   // the mark packed, first bit most significant
  uint64_t mask_ = 0;
  uint64_t reg_ = 0;         // the last n bits
  uint64_t count_ = 0;       // bits seen
  bool pending_ = false;
  SyncHit best_;
};

// Distance of the mark against an arbitrary window (for tests and the sample-domain fallback).
int hamming_distance(std::span<const uint8_t> a, std::span<const uint8_t> b);

}  // namespace salvor::frame
