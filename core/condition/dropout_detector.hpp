#pragma once
// Dropout: the readback envelope collapses (media defect, head lift). The envelope is the
// mean of |x| over a centred window of window_bits; a sample is flagged `dropout` when
// the envelope is below threshold x the running level (mean |x| with time constant
// level_time_constant_bits, updated outside flagged samples only). Samples pass through.
// An abrupt dropout is flagged from about 0.2 window after its start to 0.2 window before
// its end (the window must be mostly inside it; threshold 0.3). The window must be longer
// than the longest stretch without transitions the data can hold (unconstrained random
// data: 32 bits is exceeded with probability 2^-32 per bit), or such stretches read as
// dropouts. Thresholds: common practice, no source.
//
// Output sample i is input sample i; half a window of look-ahead is held back by
// process() and emitted by flush().

#include <cstdint>
#include <span>
#include <string>
#include <vector>

#include "common/stream.hpp"

namespace salvor {

struct DropoutDetectorConfig {
  double samples_per_bit = 0.0;            // capture samples per channel bit, > 1
  double window_bits = 32.0;               // envelope window, [1, 4096]; longer than the
                                           //   longest run without transitions
  double threshold = 0.3;                  // fraction of the running level, (0, 1)
  double level_time_constant_bits = 2000;  // [10, 1e7]
};

class DropoutDetector {
 public:
  explicit DropoutDetector(const DropoutDetectorConfig& config);
  Progress process(std::span<const float> in, std::span<const uint8_t> in_flags,
                   std::span<float> out, std::span<uint8_t> out_flags);
  Progress flush(std::span<float> out, std::span<uint8_t> out_flags);
  void reset();
  std::string describe() const;
  size_t lookahead() const { return half_; }

 private:
  void emit_center(std::span<float> out, std::span<uint8_t> out_flags, size_t& produced);
  void pop_oldest();
  double exact_sum(uint64_t from, uint64_t to) const;  // sum of |x| over ring indices [from, to)
  size_t run_steady(const float* in, const uint8_t* in_flags, float* out, uint8_t* out_flags, size_t k, size_t n,
                    size_t& produced);
  // The running level of unflagged |x| (acc / weight) and how many samples made it.
  struct Level {
    double acc = 0.0, weight = 0.0;
    uint64_t updates = 0;
  };
  // The centre sample's flags, with flag_dropout added when the envelope (sum / count)
  // is below threshold x level; an unflagged sample then updates the level. Shared by the
  // general path and the steady loop, which calls it on local copies.
  uint8_t classify(float x, uint8_t flags, double sum, double count, Level& level) const;
  DropoutDetectorConfig cfg_;
  size_t half_, width_;
  double alpha_;
  double retain_ = 1.0;  // 1 - alpha_
  size_t mask_ = 0;  // ring capacity (a power of two >= width_) minus one
  std::vector<float> ring_x_;
  std::vector<uint8_t> ring_f_;
  double sum_abs_ = 0.0;
  uint64_t next_in_ = 0, next_center_ = 0, window_start_ = 0;
  uint64_t since_recompute_ = 0;
  Level level_;
};

}  // namespace salvor
