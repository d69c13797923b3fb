#include "condition/conditioner.hpp"

#include <algorithm>
#include <cfloat>
#include <cmath>
#include <cstring>
#include <sstream>

#include "common/error.hpp"

namespace salvor {
namespace {
constexpr size_t block_samples = 4096;
enum Stage { stage_clip, stage_ta, stage_hp, stage_dropout, stage_agc, stage_asym, stage_count };
}  // namespace

Conditioner::Conditioner(const ConditionerConfig& c) : cfg_(c) {
  if (!(c.sample_rate_hz > 0.0) || !std::isfinite(c.sample_rate_hz))
    throw_usage("condition.sample_rate_hz", "must be a positive rate, got " + std::to_string(c.sample_rate_hz));
  if (!(c.bit_rate_hz > 0.0) || !std::isfinite(c.bit_rate_hz))
    throw_usage("condition.bit_rate_hz", "must be a positive rate, got " + std::to_string(c.bit_rate_hz));
  const double spb = c.sample_rate_hz / c.bit_rate_hz;
  if (!(spb > 1.0))
    throw_usage("condition.bit_rate_hz", "bit rate " + std::to_string(c.bit_rate_hz) + " needs more than one sample per bit at " +
                                             std::to_string(c.sample_rate_hz) + " Hz");
  if (c.detect_clipping) {
    auto k = c.clip;
    k.full_scale = c.full_scale;
    clip_.emplace(k);
  }
  if (c.handle_thermal_asperities) {
    auto k = c.thermal_asperity;
    k.samples_per_bit = spb;
    ta_.emplace(k);
  }
  if (c.remove_baseline) {
    auto k = c.baseline;
    k.samples_per_bit = spb;
    hp_.emplace(k);
  }
  if (c.detect_dropouts) {
    auto k = c.dropout;
    k.samples_per_bit = spb;
    dropout_.emplace(k);
  }
  if (c.normalise_gain) {
    auto k = c.agc;
    k.samples_per_bit = spb;
    agc_.emplace(k);
  }
  if (c.asymmetry.mode != AsymmetryMode::off) {
    auto k = c.asymmetry;
    k.samples_per_bit = spb;
    asym_.emplace(k);
  }
  const size_t cap = block_samples + latency();
  for (auto& b : buf_x_) b.assign(cap, 0.0f);
  for (auto& b : buf_f_) b.assign(cap, 0);
  zeros_.assign(cap, 0);
  scratch_flags_.assign(cap, 0);
}

size_t Conditioner::latency() const {
  return (clip_ ? clip_->lookahead() : 0) + (ta_ ? ta_->lookahead() : 0) + (dropout_ ? dropout_->lookahead() : 0);
}

void Conditioner::reset() {
  if (clip_) clip_->reset();
  if (ta_) ta_->reset();
  if (hp_) hp_->reset();
  if (dropout_) dropout_->reset();
  if (agc_) agc_->reset();
  if (asym_) asym_->reset();
  spans_.reset();
  all_spans_.clear();
  in_count_ = out_count_ = clipped_ = 0;
  dc_sum_ = 0.0;
  flushed_ = false;
}

std::string Conditioner::describe() const {
  std::ostringstream s;
  s << "condition @ " << cfg_.sample_rate_hz / cfg_.bit_rate_hz << " samples/bit:";
  if (clip_) s << " [" << clip_->describe() << "]";
  if (ta_) s << " [" << ta_->describe() << "]";
  if (hp_) s << " [" << hp_->describe() << "]";
  if (dropout_) s << " [" << dropout_->describe() << "]";
  if (agc_) s << " [" << agc_->describe() << "]";
  if (asym_) s << " [" << asym_->describe() << "]";
  return s.str();
}

// Runs stages first_stage.. on n samples through the ping-pong buffers 0 and 1; the result
// is copied to out. Every stage consumes all it is given (room = input size).
size_t Conditioner::run_from(int first, const float* x, const uint8_t* f, size_t n, float* out, uint8_t* out_f) {
  int which = 0;
  for (int s = first; s < stage_count; ++s) {
    float* ox = buf_x_[which].data();
    uint8_t* of = buf_f_[which].data();
    std::span<const float> ix(x, n);
    std::span<const uint8_t> iflag(f, n);
    std::span<float> sx(ox, n);
    std::span<uint8_t> sf(of, n);
    Progress p{n, n};
    switch (s) {
      case stage_clip: if (!clip_) continue; p = clip_->process(ix, iflag, sx, sf); break;
      case stage_ta: if (!ta_) continue; p = ta_->process(ix, iflag, sx, sf); break;
      case stage_hp: if (!hp_) continue; p = hp_->process(ix, iflag, sx, sf); break;
      case stage_dropout: if (!dropout_) continue; p = dropout_->process(ix, iflag, sx, sf); break;
      case stage_agc: if (!agc_) continue; p = agc_->process(ix, iflag, sx, sf); break;
      case stage_asym: if (!asym_) continue; p = asym_->process(ix, iflag, sx, sf); break;
    }
    if (p.consumed != n) throw_internal("conditioner: stage " + std::to_string(s) + " left input unconsumed");
    n = p.produced;
    x = ox;
    f = of;
    which ^= 1;
  }
  std::memmove(out, x, n * sizeof(float));
  std::memmove(out_f, f, n);
  return n;
}

void Conditioner::account(std::span<const uint8_t> flags) {
  uint32_t clipped = 0;  // a 32-bit local: the loop vectorises (flags come in blocks of 4096)
  for (uint8_t v : flags) clipped += (v & flag_clipped) ? 1u : 0u;
  clipped_ += clipped;
  spans_.add(out_count_, flags);
  out_count_ += flags.size();
  auto closed = spans_.take_spans();
  all_spans_.insert(all_spans_.end(), closed.begin(), closed.end());
}

Progress Conditioner::process(std::span<const float> in, std::span<float> out, std::span<uint8_t> out_flags) {
  if (out_flags.size() < out.size())
    throw_usage("conditioner", "flag output must be as long as the sample output");
  if (flushed_ && !in.empty()) throw_usage("conditioner", "process() after flush(): call reset() first");
  size_t consumed = 0, produced = 0;
  while (consumed < in.size() && produced < out.size()) {
    const size_t n = std::min({in.size() - consumed, block_samples, out.size() - produced});
    // One vectorisable pass: four partial sums for the mean, and a flag for any sample
    // that is not finite (located exactly only when there is one).
    const float* blk = in.data() + consumed;
    double s0 = 0, s1 = 0, s2 = 0, s3 = 0;
    bool finite = true;
    size_t i = 0;
    for (; i + 4 <= n; i += 4) {
      finite &= std::fabs(blk[i]) <= FLT_MAX && std::fabs(blk[i + 1]) <= FLT_MAX &&
                std::fabs(blk[i + 2]) <= FLT_MAX && std::fabs(blk[i + 3]) <= FLT_MAX;
      s0 += blk[i];
      s1 += blk[i + 1];
      s2 += blk[i + 2];
      s3 += blk[i + 3];
    }
    for (; i < n; ++i) {
      finite &= std::fabs(blk[i]) <= FLT_MAX;
      s0 += blk[i];
    }
    if (!finite) {
      for (size_t k = 0; k < n; ++k)
        if (!std::isfinite(blk[k]))
          throw_input("conditioner",
                      "sample " + std::to_string(in_count_ + k) + " is not finite (" + std::to_string(blk[k]) + ")");
    }
    dc_sum_ += (s0 + s1) + (s2 + s3);
    const size_t m = run_from(stage_clip, in.data() + consumed, zeros_.data(), n, out.data() + produced,
                              out_flags.data() + produced);
    account(out_flags.subspan(produced, m));
    in_count_ += n;
    consumed += n;
    produced += m;
  }
  return {consumed, produced};
}

Progress Conditioner::process(std::span<const float> in, std::span<float> out) {
  size_t consumed = 0, produced = 0;
  while (consumed < in.size() && produced < out.size()) {
    const size_t n = std::min({in.size() - consumed, block_samples, out.size() - produced});
    const auto p = process(in.subspan(consumed, n), out.subspan(produced, n), std::span<uint8_t>(scratch_flags_.data(), n));
    consumed += p.consumed;
    produced += p.produced;
  }
  return {consumed, produced};
}

Progress Conditioner::flush(std::span<float> out, std::span<uint8_t> out_flags) {
  if (out.size() < pending() || out_flags.size() < pending())
    throw_usage("conditioner", "flush needs room for " + std::to_string(pending()) + " samples, got " +
                                   std::to_string(std::min(out.size(), out_flags.size())));
  size_t produced = 0;
  float* fx = buf_x_[2].data();
  uint8_t* ff = buf_f_[2].data();
  const size_t room = buf_x_[2].size();
  auto drain = [&](int stage, auto& obj) {
    for (;;) {
      const auto p = obj.flush(std::span<float>(fx, room), std::span<uint8_t>(ff, room));
      if (p.produced == 0) break;
      const size_t m = run_from(stage + 1, fx, ff, p.produced, out.data() + produced, out_flags.data() + produced);
      account(out_flags.subspan(produced, m));
      produced += m;
    }
  };
  if (clip_) drain(stage_clip, *clip_);
  if (ta_) drain(stage_ta, *ta_);
  if (dropout_) drain(stage_dropout, *dropout_);
  spans_.close(out_count_);
  auto closed = spans_.take_spans();
  all_spans_.insert(all_spans_.end(), closed.begin(), closed.end());
  flushed_ = true;
  if (pending() != 0) throw_internal("conditioner: " + std::to_string(pending()) + " samples left after flush");
  return {0, produced};
}

ConditionSummary Conditioner::summary() const {
  ConditionSummary s;
  s.samples = in_count_;
  s.dc_offset = in_count_ ? dc_sum_ / static_cast<double>(in_count_) : 0.0;
  s.clipped_samples = clipped_;
  s.clipped_fraction = out_count_ ? static_cast<double>(clipped_) / static_cast<double>(out_count_) : 0.0;
  s.spans = all_spans_;
  s.gain = agc_ ? agc_->gain() : 1.0;
  s.asymmetry_c = asym_ ? asym_->coefficient() : 0.0;
  return s;
}

std::vector<FlagSpan> Conditioner::take_spans() {
  std::vector<FlagSpan> out;
  out.swap(all_spans_);
  return out;
}

}  // namespace salvor
