#include "condition/clip_detector.hpp"

#include <algorithm>
#include <cmath>
#include <sstream>

#include "common/error.hpp"
#include "condition/flags.hpp"

namespace salvor {

ClipDetector::ClipDetector(const ClipDetectorConfig& c) : cfg_(c) {
  if (!(c.full_scale > 0.0) || !std::isfinite(c.full_scale))
    throw_usage("condition.clip.full_scale", "must be > 0, got " + std::to_string(c.full_scale));
  if (!(c.margin >= 0.0 && c.margin < 0.5))
    throw_usage("condition.clip.margin", "must be in [0, 0.5), got " + std::to_string(c.margin));
  if (c.min_run != 0 && (c.min_run < 2 || c.min_run > 1024))
    throw_usage("condition.clip.min_run", "must be 0 (off) or in [2, 1024], got " + std::to_string(c.min_run));
  if (!(c.run_level > 0.0 && c.run_level <= 1.0))
    throw_usage("condition.clip.run_level", "must be in (0, 1], got " + std::to_string(c.run_level));
  clip_level_ = static_cast<float>((1.0 - c.margin) * c.full_scale);
  run_level_ = static_cast<float>(c.run_level * c.full_scale);
  delay_ = c.min_run > 0 ? static_cast<size_t>(c.min_run - 1) : 0;
  ring_x_.assign(delay_ + 1, 0.0f);
  ring_f_.assign(delay_ + 1, 0);
  reset();
}

void ClipDetector::reset() {
  head_ = count_ = 0;
  run_value_ = 0.0f;
  run_len_ = 0;
}

std::string ClipDetector::describe() const {
  std::ostringstream s;
  s << "clip: |x| >= " << clip_level_ << " or " << cfg_.min_run << " identical values at |x| >= " << run_level_;
  return s.str();
}

void ClipDetector::emit(size_t& produced, std::span<float> out, std::span<uint8_t> out_flags) {
  out[produced] = ring_x_[head_];
  out_flags[produced] = ring_f_[head_];
  ++produced;
  head_ = (head_ + 1) % ring_x_.size();
  --count_;
}

Progress ClipDetector::process(std::span<const float> in, std::span<const uint8_t> in_flags,
                               std::span<float> out, std::span<uint8_t> out_flags) {
  const size_t n = std::min(in.size(), out.size());
  const size_t cap = ring_x_.size();
  size_t produced = 0;
  for (size_t i = 0; i < n; ++i) {
    const float x = in[i];
    uint8_t f = in_flags[i];
    if (std::abs(x) >= clip_level_) f |= flag_clipped;
    if (cfg_.min_run > 0) {
      if (x == run_value_ && std::abs(x) >= run_level_) {
        ++run_len_;
      } else {
        run_value_ = x;
        run_len_ = 1;
      }
      if (run_len_ >= cfg_.min_run) {
        f |= flag_clipped;
        if (run_len_ == cfg_.min_run) {
          // The earlier members of the run are the `delay_` samples still held back.
          for (size_t k = 0; k < count_; ++k) ring_f_[(head_ + k) % cap] |= flag_clipped;
        }
      }
    }
    const size_t tail = (head_ + count_) % cap;
    ring_x_[tail] = x;
    ring_f_[tail] = f;
    ++count_;
    if (count_ > delay_) emit(produced, out, out_flags);
  }
  return {n, produced};
}

Progress ClipDetector::flush(std::span<float> out, std::span<uint8_t> out_flags) {
  size_t produced = 0;
  while (count_ > 0 && produced < out.size()) emit(produced, out, out_flags);
  return {0, produced};
}

}  // namespace salvor
