#include "trellis/maxlogmap.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <sstream>

#include "common/error.hpp"

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
constexpr double kNegInf = -std::numeric_limits<double>::infinity();
}  // namespace

MaxLogMap::MaxLogMap(std::span<const double> target, const MaxLogMapConfig& config)
    : trellis_(target, 1),
      config_(validated(config)),
      S_(trellis_.states()),
      capacity_(static_cast<size_t>(config.block_length + config.overlap)) {
  const size_t S = static_cast<size_t>(S_);
  y_.assign(capacity_, 0.0f);
  erased_.assign(capacity_, 0);
  alpha_start_.assign(S, 0.0);
  alpha_.assign(capacity_ * S, 0.0);
  beta_.assign(S, 0.0);
  beta_prev_.assign(S, 0.0);
  gamma_.assign(2 * S, 0.0);
  raw_.assign(capacity_, 0.0);
  best_residual_.assign(capacity_, 0.0);
}

// Forward over the first `emit` buffered steps (storing alpha), backward from step
// `total` (all states equal there), LLRs of the first `emit` steps.
void MaxLogMap::run(size_t emit, size_t total, std::span<uint8_t> bits, std::span<float> llr) {
  const int S = S_;
  const uint8_t* p0 = trellis_.pred_row(0);
  const uint8_t* p1 = trellis_.pred_row(1);
  const double* o0 = trellis_.output_row(0);
  const double* o1 = trellis_.output_row(1);
  auto branch_metrics = [&](size_t t) {
    const size_t slot = (head_ + t) % capacity_;
    const double y = y_[slot];
    if (erased_[slot]) {
      std::fill(gamma_.begin(), gamma_.end(), 0.0);
      return;
    }
    for (int s = 0; s < S; ++s) {
      const double e0 = y - o0[s], e1 = y - o1[s];
      gamma_[s] = -e0 * e0;
      gamma_[S + s] = -e1 * e1;
    }
  };
  // Forward.
  for (size_t t = 0; t < emit; ++t) {
    branch_metrics(t);
    const double* prev = t == 0 ? alpha_start_.data() : &alpha_[(t - 1) * S];
    double* cur = &alpha_[t * S];
    double best = kNegInf;
    for (int s = 0; s < S; ++s) {
      const double v = std::max(prev[p0[s]] + gamma_[s], prev[p1[s]] + gamma_[S + s]);
      cur[s] = v;
      best = std::max(best, v);
    }
    for (int s = 0; s < S; ++s) cur[s] -= best;  // renormalise
  }
  // Backward.
  std::fill(beta_.begin(), beta_.end(), 0.0);
  for (size_t t = total; t-- > 0;) {
    branch_metrics(t);
    if (t < emit) {
      const double* a = t == 0 ? alpha_start_.data() : &alpha_[(t - 1) * S];
      double best1 = kNegInf, best0 = kNegInf, best = kNegInf;
      double best_out = 0.0;
      for (int j = 0; j < 2; ++j) {
        const uint8_t* pr = j ? p1 : p0;
        for (int s = 0; s < S; ++s) {
          const double v = a[pr[s]] + gamma_[j * S + s] + beta_[s];
          if (trellis_.nrzi(j, s)) best1 = std::max(best1, v);
          else best0 = std::max(best0, v);
          if (v > best) {
            best = v;
            best_out = trellis_.output(j, s);
          }
        }
      }
      raw_[t] = best1 - best0;
      const size_t slot = (head_ + t) % capacity_;
      best_residual_[t] = erased_[slot] ? -1.0 : (y_[slot] - best_out) * (y_[slot] - best_out);
    }
    std::fill(beta_prev_.begin(), beta_prev_.end(), kNegInf);
    for (int j = 0; j < 2; ++j) {
      const uint8_t* pr = j ? p1 : p0;
      for (int s = 0; s < S; ++s) {
        const double v = beta_[s] + gamma_[j * S + s];
        double& dst = beta_prev_[pr[s]];
        dst = std::max(dst, v);
      }
    }
    const double best = *std::max_element(beta_prev_.begin(), beta_prev_.end());
    for (int s = 0; s < S; ++s) beta_[s] = beta_prev_[s] - best;
  }
  for (size_t t = 0; t < emit; ++t)
    if (best_residual_[t] >= 0.0) {
      residual_sum_ += best_residual_[t];
      ++residual_count_;
    }
  double var = config_.noise_sigma > 0.0 ? config_.noise_sigma * config_.noise_sigma
               : residual_count_ ? residual_sum_ / static_cast<double>(residual_count_)
                                 : 1.0;
  const double scale = 0.5 / std::max(var, 1e-12);
  for (size_t t = 0; t < emit; ++t) {
    const double v = std::clamp(raw_[t] * scale, -double(kLlrCap), double(kLlrCap));
    bits[t] = raw_[t] > 0.0 ? 1 : 0;
    llr[t] = static_cast<float>(v);
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
  for (size_t k = 0; k < samples.size(); ++k)
    if (!std::isfinite(samples[k]) && (erasure.empty() || !erasure[k]))
      throw_input("detector input", "sample " + std::to_string(k) + " of the block is not a finite number");
  const size_t B = static_cast<size_t>(config_.block_length);
  Progress p;
  for (; p.consumed < samples.size(); ++p.consumed) {
    if (count_ + 1 == capacity_ && bits.size() - p.produced < B) break;
    const size_t slot = (head_ + count_) % capacity_;
    const bool erased = !erasure.empty() && erasure[p.consumed] != 0;
    y_[slot] = erased ? 0.0f : samples[p.consumed];
    erased_[slot] = erased ? 1 : 0;
    ++count_;
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
  std::fill(alpha_start_.begin(), alpha_start_.end(), 0.0);
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
