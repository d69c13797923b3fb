#include "trellis/maxlogmap.hpp"

#include <algorithm>
#include <bit>
#include <cmath>
#include <limits>
#include <sstream>

#include "common/error.hpp"
#include "input_check.hpp"
#include "trellis/kernels.hpp"

namespace salvor::trellis {

namespace {
const MaxLogMapConfig& validated(const MaxLogMapConfig& c) {
  if (c.block_length < 16 || c.block_length > MaxLogMap::kMaxBlock)
    throw_usage("block_length", "value " + std::to_string(c.block_length) + " is outside 16.." +
                                    std::to_string(MaxLogMap::kMaxBlock));
  if (c.overlap < 0 || c.overlap > MaxLogMap::kMaxOverlap)
    throw_usage("overlap", "value " + std::to_string(c.overlap) + " is outside 0.." +
                               std::to_string(MaxLogMap::kMaxOverlap));
  if (!std::isfinite(c.noise_sigma)) throw_usage("noise_sigma", "value is not a finite number");
  return c;
}
}  // namespace

MaxLogMap::MaxLogMap(std::span<const double> target, const MaxLogMapConfig& config)
    : trellis_(target, 1),
      config_(validated(config)),
      S_(trellis_.states()),
      capacity_(static_cast<size_t>(config.block_length + config.overlap)) {
  const size_t S = static_cast<size_t>(S_);
  y_.assign(capacity_, 0.0f);
  erased_.assign(capacity_, 0);
  alpha_start_.assign(S, 0.0f);
  alpha_.assign(capacity_ * S, 0.0f);
  beta_.assign(S, 0.0f);
  beta_kept_.assign((capacity_ / 2 + 1 + 2 * (capacity_ / 2)) * S, 0.0f);  // see maxlog_forward_backward_simd
  raw_.assign(capacity_, 0.0f);
  best_branch_.assign(capacity_, 0);
  y_lin_.assign(capacity_, 0.0f);
  erased_lin_.assign(capacity_, 0);
  out0f_.resize(S);
  out1f_.resize(S);
  nrzi0_.resize(S);
  nrzi1_.resize(S);
  for (int s = 0; s < S_; ++s) {
    out0f_[s] = static_cast<float>(trellis_.output(0, s));
    out1f_[s] = static_cast<float>(trellis_.output(1, s));
    nrzi0_[s] = trellis_.nrzi(0, s);
    nrzi1_[s] = trellis_.nrzi(1, s);
  }
}

// Forward over the first `emit` buffered steps (storing alpha), backward from step
// `total` (all states equal there), LLRs of the first `emit` steps.
void MaxLogMap::run(size_t emit, size_t total, std::span<uint8_t> bits, std::span<float> llr) {
  const int S = S_;
  // The ring in step order: [head_, capacity_) then [0, ..).
  const size_t first = std::min(total, capacity_ - head_);
  std::copy_n(y_.data() + head_, first, y_lin_.data());
  std::copy_n(y_.data(), total - first, y_lin_.data() + first);
  std::copy_n(erased_.data() + head_, first, erased_lin_.data());
  std::copy_n(erased_.data(), total - first, erased_lin_.data() + first);
  const MaxLogTables tab{S, out0f_.data(), out1f_.data(), nrzi0_.data(), nrzi1_.data()};
  // The best branch is only needed for the noise estimate.
  uint16_t* best = config_.noise_sigma > 0.0 ? nullptr : best_branch_.data();
  if (config_.simd) {
    // Forward and backward side by side (the same bits as one after the other).
    std::fill(beta_.begin(), beta_.end(), 0.0f);
    maxlog_forward_backward_simd(tab, alpha_start_.data(), y_lin_.data(), erased_lin_.data(), emit, total,
                                 alpha_.data(), beta_.data(), beta_kept_.data(), raw_.data(), best);
  } else {
    maxlog_forward_scalar(tab, alpha_start_.data(), y_lin_.data(), erased_lin_.data(), emit,
                          alpha_.data());
    std::fill(beta_.begin(), beta_.end(), 0.0f);
    maxlog_backward_scalar(tab, alpha_start_.data(), alpha_.data(), y_lin_.data(),
                           erased_lin_.data(), total, emit, beta_.data(), raw_.data(), best);
  }
  if (best) {
    for (size_t t = 0; t < emit; ++t) {
      if (erased_lin_[t]) continue;
      const int b = best_branch_[t];
      const double e = static_cast<double>(y_lin_[t]) - trellis_.output(b / S, b % S);
      residual_sum_ += e * e;
      ++residual_count_;
    }
  }
  double var = config_.noise_sigma > 0.0 ? config_.noise_sigma * config_.noise_sigma
               : residual_count_ ? residual_sum_ / static_cast<double>(residual_count_)
                                 : 1.0;
  // In float, so that the loop vectorises.
  const auto scale = static_cast<float>(0.5 / std::max(var, 1e-12));
  const float* __restrict raw = raw_.data();
  uint8_t* __restrict out_bits = bits.data();
  float* __restrict out_llr = llr.data();
  for (size_t t = 0; t < emit; ++t) {
    out_bits[t] = raw[t] > 0.0f ? 1 : 0;
    out_llr[t] = std::clamp(raw[t] * scale, -kLlrCap, kLlrCap);
  }
  // Carry the forward metrics; drop the released samples.
  if (emit > 0) std::copy_n(&alpha_[(emit - 1) * S], S, alpha_start_.begin());
  head_ = (head_ + emit) % capacity_;
  count_ -= emit;
}

Progress MaxLogMap::process(std::span<const float> samples, std::span<const uint8_t> erasure,
                            std::span<uint8_t> bits, std::span<float> llr) {
  if (!erasure.empty() && erasure.size() != samples.size())
    throw_usage("process", "erasure flags (" + std::to_string(erasure.size()) +
                               ") and samples (" + std::to_string(samples.size()) +
                               ") differ in length");
  if (bits.size() != llr.size()) throw_usage("process", "bit and llr buffers differ in length");
  refuse_unflagged_non_finite(samples, erasure);
  const size_t B = static_cast<size_t>(config_.block_length);
  Progress p;
  while (p.consumed < samples.size()) {
    // Stop one sample short of a full buffer when there is no room for the block.
    const bool room = bits.size() - p.produced >= B;
    const size_t slot = (head_ + count_) % capacity_;
    size_t n = std::min({samples.size() - p.consumed, capacity_ - count_, capacity_ - slot});
    if (!room) n = std::min(n, capacity_ - 1 - count_);
    if (n == 0) break;
    if (erasure.empty()) {
      std::copy_n(samples.data() + p.consumed, n, y_.data() + slot);
      std::fill_n(erased_.data() + slot, n, uint8_t{0});
    } else {
      for (size_t i = 0; i < n; ++i) {
        const bool erased = erasure[p.consumed + i] != 0;
        y_[slot + i] = erased ? 0.0f : samples[p.consumed + i];
        erased_[slot + i] = erased ? 1 : 0;
      }
    }
    count_ += n;
    p.consumed += n;
    if (count_ == capacity_) {
      run(B, capacity_, bits.subspan(p.produced, B), llr.subspan(p.produced, B));
      p.produced += B;
    }
  }
  return p;
}

size_t MaxLogMap::flush(std::span<uint8_t> bits, std::span<float> llr) {
  const size_t n = count_;
  if (bits.size() < n || llr.size() < n)
    throw_usage("flush", "output room " + std::to_string(std::min(bits.size(), llr.size())) +
                             " is less than the " + std::to_string(n) + " bits held back");
  if (n) run(n, n, bits, llr);
  clear_span();
  return n;
}

void MaxLogMap::clear_span() {
  std::fill(alpha_start_.begin(), alpha_start_.end(), 0.0f);
  head_ = 0;
  count_ = 0;
}

void MaxLogMap::reset() {
  clear_span();
  residual_sum_ = 0.0;
  residual_count_ = 0;
}

std::string MaxLogMap::describe() const {
  std::ostringstream o;
  o << "max-log-MAP; " << trellis_.describe() << "; block " << config_.block_length
    << " bits, backward warm-up " << config_.overlap << " bits";
  if (config_.noise_sigma > 0.0) o << ", noise sigma " << config_.noise_sigma;
  else o << ", noise sigma estimated";
  return o.str();
}

}  // namespace salvor::trellis
