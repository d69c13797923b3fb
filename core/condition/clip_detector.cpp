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
  work_x_.assign(delay_ + kBlock, 0.0f);
  work_f_.assign(delay_ + kBlock, 0);
  reset();
}

void ClipDetector::reset() {
  held_ = 0;
  run_value_ = 0.0f;
  run_len_ = 0;
}

std::string ClipDetector::describe() const {
  std::ostringstream s;
  s << "clip: |x| >= " << clip_level_ << " or " << cfg_.min_run << " identical values at |x| >= " << run_level_;
  return s.str();
}

Progress ClipDetector::process(std::span<const float> in, std::span<const uint8_t> in_flags,
                               std::span<float> out, std::span<uint8_t> out_flags) {
  const size_t n = std::min(in.size(), out.size());
  size_t produced = 0;
  for (size_t off = 0; off < n; off += kBlock) {
    const size_t m = std::min(kBlock, n - off);
    float* wx = work_x_.data();
    uint8_t* wf = work_f_.data();
    // Level test on the whole block first (vectorised), then the run test, which is
    // sequential but almost always a single comparison.
    for (size_t i = 0; i < m; ++i) {
      const float x = in[off + i];
      wx[held_ + i] = x;
      wf[held_ + i] = static_cast<uint8_t>(in_flags[off + i] | (std::abs(x) >= clip_level_ ? flag_clipped : 0));
    }
    if (cfg_.min_run > 0) {
      for (size_t i = 0; i < m; ++i) {
        const float x = wx[held_ + i];
        if (x == run_value_ && std::abs(x) >= run_level_) {
          ++run_len_;
        } else {
          run_value_ = x;
          run_len_ = 1;
        }
        if (run_len_ >= cfg_.min_run) {
          wf[held_ + i] |= flag_clipped;
          // The run's earlier members are the delay_ samples before this one, all still
          // in the work area (held back from the previous block or earlier in this one).
          if (run_len_ == cfg_.min_run)
            for (size_t k = held_ + i - delay_; k < held_ + i; ++k) wf[k] |= flag_clipped;
        }
      }
    }
    // Everything but the last delay_ samples is decided: emit it, keep the rest.
    const size_t total = held_ + m;
    const size_t emit = total > delay_ ? total - delay_ : 0;
    std::copy(wx, wx + emit, out.begin() + static_cast<long>(produced));
    std::copy(wf, wf + emit, out_flags.begin() + static_cast<long>(produced));
    produced += emit;
    std::copy(wx + emit, wx + total, wx);
    std::copy(wf + emit, wf + total, wf);
    held_ = total - emit;
  }
  return {n, produced};
}

Progress ClipDetector::flush(std::span<float> out, std::span<uint8_t> out_flags) {
  const size_t k = std::min({held_, out.size(), out_flags.size()});
  std::copy(work_x_.begin(), work_x_.begin() + static_cast<long>(k), out.begin());
  std::copy(work_f_.begin(), work_f_.begin() + static_cast<long>(k), out_flags.begin());
  std::copy(work_x_.begin() + static_cast<long>(k), work_x_.begin() + static_cast<long>(held_), work_x_.begin());
  std::copy(work_f_.begin() + static_cast<long>(k), work_f_.begin() + static_cast<long>(held_), work_f_.begin());
  held_ -= k;
  return {0, k};
}

}  // namespace salvor
