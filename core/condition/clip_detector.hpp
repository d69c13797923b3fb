#pragma once
// Digitizer saturation: a sample is flagged `clipped` when |x| >= (1 - margin) x
// full_scale (full_scale comes from the loader: the value of a full-scale sample), or
// when it belongs to a run of at least min_run identical values with |x| >=
// run_level x full_scale (a converter that saturates below its nominal full scale, or a
// rig that limits before the digitizer). Samples pass through unchanged; only flags are
// added. Thresholds are common practice, no source.
//
// Output sample i is input sample i. The run rule needs min_run - 1 samples of look-ahead,
// so process() holds back that many and flush() emits them at the end of the stream.

#include <cstdint>
#include <span>
#include <string>
#include <vector>

#include "common/stream.hpp"

namespace salvor {

struct ClipDetectorConfig {
  double full_scale = 1.0;  // loader's full-scale sample value, > 0
  double margin = 0.002;    // fraction of full scale counted as saturated, [0, 0.5)
  int min_run = 3;          // identical extreme values that make a run; 0 disables, else >= 2
  double run_level = 0.5;   // runs only count at |x| >= run_level * full_scale, (0, 1]
};

class ClipDetector {
 public:
  explicit ClipDetector(const ClipDetectorConfig& config);
  // Consumes min(in.size(), out.size()) samples; produces as many, less the look-ahead.
  Progress process(std::span<const float> in, std::span<const uint8_t> in_flags,
                   std::span<float> out, std::span<uint8_t> out_flags);
  // Emits the held-back samples; call until it produces 0.
  Progress flush(std::span<float> out, std::span<uint8_t> out_flags);
  void reset();
  std::string describe() const;
  size_t lookahead() const { return delay_; }

 private:
  static constexpr size_t kBlock = 4096;
  ClipDetectorConfig cfg_;
  float clip_level_, run_level_;
  size_t delay_;
  // The last delay_ samples, held back until a run they may belong to is decided, and the
  // work area of one block: held samples followed by the block's input.
  std::vector<float> work_x_;
  std::vector<uint8_t> work_f_;
  size_t held_ = 0;  // samples held at the front of work_x_
  float run_value_ = 0.0f;
  int run_len_ = 0;
};

}  // namespace salvor
