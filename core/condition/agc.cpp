#include "condition/agc.hpp"

#include <algorithm>
#include <cmath>
#include <cstring>
#include <sstream>

#include "common/error.hpp"

namespace salvor {

Agc::Agc(const AgcConfig& c) : cfg_(c) {
  if (!(c.samples_per_bit > 1.0) || !std::isfinite(c.samples_per_bit))
    throw_usage("condition.agc.samples_per_bit", "must be > 1, got " + std::to_string(c.samples_per_bit));
  if (!(c.time_constant_bits >= 1.0 && c.time_constant_bits <= 1e7))
    throw_usage("condition.agc.time_constant_bits", "must be in [1, 1e7], got " + std::to_string(c.time_constant_bits));
  if (!(c.reference_rms > 0.0) || !std::isfinite(c.reference_rms))
    throw_usage("condition.agc.reference_rms", "must be > 0, got " + std::to_string(c.reference_rms));
  if (!(c.max_gain > 0.0) || !std::isfinite(c.max_gain))
    throw_usage("condition.agc.max_gain", "must be > 0, got " + std::to_string(c.max_gain));
  if (!(c.initial_gain > 0.0) || !std::isfinite(c.initial_gain))
    throw_usage("condition.agc.initial_gain", "must be > 0, got " + std::to_string(c.initial_gain));
  const double alpha = 1.0 - std::exp(-1.0 / (c.time_constant_bits * c.samples_per_bit));
  // a = retain a + alpha v: one multiply on the recursion's critical path
  tables_ = block_recursions::average_block_tables(alpha, 1.0 - alpha);
  reset();
}

void Agc::reset() {
  gain_ = cfg_.initial_gain;
  frozen_ = cfg_.frozen;
  level_.reset();
}

std::string Agc::describe() const {
  std::ostringstream s;
  s << "agc: rms to " << cfg_.reference_rms << ", time constant " << cfg_.time_constant_bits
    << " bits, max gain " << cfg_.max_gain << (frozen_ ? ", frozen" : "");
  return s.str();
}

template <bool with_flags>
Progress Agc::run_reference(std::span<const float> in, std::span<const uint8_t> in_flags, std::span<float> out,
                            std::span<uint8_t> out_flags) {
  const size_t n = std::min(in.size(), out.size());
  // The state lives in locals for the loop: a flag byte store may alias any member, which
  // would otherwise force every member to be reloaded after it.
  double acc = level_.acc, weight = level_.weight, gain = gain_;
  const double alpha = tables_.alpha, retain = tables_.retain, max_gain = cfg_.max_gain, reference = cfg_.reference_rms;
  const bool frozen = frozen_;
  for (size_t i = 0; i < n; ++i) {
    const double x = in[i];
    bool update = !frozen;
    if constexpr (with_flags) {
      out_flags[i] = in_flags[i];
      update = update && in_flags[i] == 0;
    }
    if (update) {
      acc = retain * acc + alpha * (x * x);
      weight = retain * weight + alpha;
      // reference / sqrt(acc / weight) in one division and one square root
      gain = acc > 0.0 ? std::min(max_gain, reference * std::sqrt(weight / acc)) : max_gain;
    }
    out[i] = static_cast<float>(x * gain);
  }
  level_.acc = acc;
  level_.weight = weight;
  gain_ = gain;
  return {n, n};
}

template <bool with_flags>
Progress Agc::run(std::span<const float> in, std::span<const uint8_t> in_flags, std::span<float> out,
                  std::span<uint8_t> out_flags) {
  if (cfg_.reference_kernel) return run_reference<with_flags>(in, in_flags, out, out_flags);
  using block_recursions::kBlock;
  const size_t n = std::min(in.size(), out.size());
  if constexpr (with_flags) std::copy_n(in_flags.begin(), n, out_flags.begin());
  const double reference = cfg_.reference_rms, max_gain = cfg_.max_gain;
  size_t i = 0;
  while (i < n) {
    if (level_.at_block_start() && !frozen_ && n - i >= kBlock) {
      // Whole blocks in which no sample carries a flag.
      size_t blocks = 0;
      const size_t most = (n - i) / kBlock;
      if constexpr (with_flags) {
        const uint8_t* f = in_flags.data() + i;
        while (blocks < most) {
          uint64_t eight;
          std::memcpy(&eight, f + blocks * kBlock, sizeof eight);
          if (eight != 0) break;
          ++blocks;
        }
      } else {
        blocks = most;
      }
      if (blocks > 0) {
        block_recursions::agc_blocks(tables_, in.data() + i, out.data() + i, blocks, level_, reference, max_gain, gain_);
        i += blocks * kBlock;
        continue;
      }
    }
    const double x = in[i];
    bool update = !frozen_;
    if constexpr (with_flags) update = update && in_flags[i] == 0;
    level_.step(tables_, update, x * x);
    if (update) gain_ = block_recursions::agc_gain(level_.acc, level_.weight, reference, max_gain);
    out[i] = block_recursions::to_float_clamped(x * gain_);
    ++i;
  }
  return {n, n};
}

Progress Agc::process(std::span<const float> in, std::span<float> out) { return run<false>(in, {}, out, {}); }

Progress Agc::process(std::span<const float> in, std::span<const uint8_t> in_flags, std::span<float> out,
                      std::span<uint8_t> out_flags) {
  return run<true>(in, in_flags, out, out_flags);
}

}  // namespace salvor
