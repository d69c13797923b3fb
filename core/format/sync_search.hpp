#pragma once
// Streaming sync-mark search with a Hamming tolerance (common practice: keep the last n
// detected bits in a shift register and declare sync when popcount(register xor mark)
// <= E; J. L. Massey, "Optimum frame synchronization", IEEE Trans. Commun. 20(2), 1972,
// has the optimum soft rule, of which this is the hard-decision limit). Hits closer than
// one mark length to each other are one mark seen at several shifts: only the best is
// reported (the earliest on a tie). Feeding the bits in chunks of any size gives the
// same hits.

#include <cstddef>
#include <cstdint>
#include <optional>
#include <span>
#include <string>
#include <vector>

#include "common/stream.hpp"

namespace salvor::format {

struct SyncHit {
  size_t position = 0;  // first bit of the mark, counted from the first bit fed
  int distance = 0;     // Hamming distance to the mark
};

struct SyncSearchConfig {
  std::vector<uint8_t> mark;  // 1..64 channel bits, 0/1
  int tolerance = 0;          // 0..mark length
};

class SyncSearch {
 public:
  explicit SyncSearch(const SyncSearchConfig& config);  // throws salvor::Error(usage)

  // Consumes channel bits (0/1) and writes the hits that are final into `out`. Stops
  // early only when `out` is full (then consumed < in.size()).
  Progress process(std::span<const uint8_t> in, std::span<SyncHit> out);
  // At the end of the stream: the hit still held back for a possible better neighbour.
  std::optional<SyncHit> flush();
  void reset();
  std::string describe() const;

 private:
  SyncSearchConfig config_;
  uint64_t want_ = 0, mask_ = 0, reg_ = 0;
  size_t seen_ = 0;                 // bits consumed since reset
  std::optional<SyncHit> pending_;  // best hit of the current cluster
};

// Whole-buffer convenience: every hit in `bits`.
std::vector<SyncHit> find_sync_marks(std::span<const uint8_t> bits, std::span<const uint8_t> mark,
                                     int tolerance);

}  // namespace salvor::format
