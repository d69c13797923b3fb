#include "trellis/sequence_detector.hpp"

#include <algorithm>
#include <array>
#include <bit>
#include <cstring>
#include <cmath>
#include <limits>
#include <sstream>

#include "common/error.hpp"
#include "input_check.hpp"
#include "trellis/kernels.hpp"

namespace salvor::trellis {

namespace {

const SequenceDetectorConfig& validated(const SequenceDetectorConfig& c) {
  if (c.traceback_depth < 8 || c.traceback_depth > SequenceDetector::kMaxTraceback)
    throw_usage("traceback_depth", "value " + std::to_string(c.traceback_depth) +
                                       " is outside 8.." +
                                       std::to_string(SequenceDetector::kMaxTraceback));
  if (c.reliability && (c.reliability_window < 1 || c.reliability_window > c.traceback_depth))
    throw_usage("reliability_window", "value " + std::to_string(c.reliability_window) +
                                          " is outside 1..traceback_depth (" +
                                          std::to_string(c.traceback_depth) + ")");
  if (!std::isfinite(c.noise_sigma))
    throw_usage("noise_sigma", "value is not a finite number");
  if (c.kind == MetricKind::noise_predictive &&
      (c.predictor_order < 1 || c.predictor_order > kMaxPredictorOrder))
    throw_usage("predictor_order", "value " + std::to_string(c.predictor_order) +
                                       " is outside 1.." + std::to_string(kMaxPredictorOrder));
  if (c.kind == MetricKind::pattern_dependent) {
    if (c.predictor_order < 0 || c.predictor_order > kMaxPredictorOrder)
      throw_usage("predictor_order", "value " + std::to_string(c.predictor_order) +
                                         " is outside 0.." + std::to_string(kMaxPredictorOrder));
    if (c.pattern_bits < 1 || c.pattern_bits > kMaxMemory + 1)
      throw_usage("pattern_length", "value " + std::to_string(c.pattern_bits) +
                                        " is outside 1.." + std::to_string(kMaxMemory + 1));
  }
  if (c.adapt_min_samples < 1) throw_usage("adapt_min_samples", "value must be at least 1");
  return c;
}

int trellis_memory_for(const SequenceDetectorConfig& c) {
  return c.kind == MetricKind::pattern_dependent ? std::max(1, c.pattern_bits - 1) : 1;
}

int order_for(const SequenceDetectorConfig& c) {
  return c.kind == MetricKind::euclidean ? 0 : c.predictor_order;
}

}  // namespace

SequenceDetector::SequenceDetector(std::span<const double> target,
                                   const SequenceDetectorConfig& config)
    : trellis_(target, trellis_memory_for(validated(config))),
      config_(config),
      S_(trellis_.states()),
      N_(order_for(config)),
      window_(kWindow),
      release_(kWindow - static_cast<size_t>(config.traceback_depth)),
      d2min_(min_squared_distance(target)),
      np_estimator_(config.kind == MetricKind::noise_predictive ? N_ : 0),
      pd_estimator_(config.kind == MetricKind::pattern_dependent ? N_ : 0,
                    config.kind == MetricKind::pattern_dependent ? config.pattern_bits : 1),
      trace_table_(trellis_.memory()) {
  const size_t S = static_cast<size_t>(S_);
  histf_.assign(static_cast<size_t>(N_) * S, 0.0f);
  euclidean_ = config_.kind == MetricKind::euclidean;
  fixed_ = euclidean_ && config_.fixed_point;
  segments_ = fixed_ && config_.parallel_segments && (S_ == 8 || S_ == 16);
  if (segments_) {
    const size_t period = fixed_dual_period(trellis_.memory());
    lookahead_ = (static_cast<size_t>(config_.traceback_depth) + period - 1) / period * period;
    window_ = 4 * kSegmentHalf;  // a segment, its look-ahead and the next one's first half
    pm_next_.assign(S, 0);
    next_dec_.assign(lookahead_, 0);
    warm_dec_.assign(lookahead_, 0);
    next_delta_.assign(config_.reliability ? lookahead_ * S : 0, 0);
    warm_delta_.assign(next_delta_.size(), 0);
  }
  decisions_.assign(fixed_ ? 0 : window_, 0);
  // Segments: room after the ring for a copy of the look-ahead that wraps to its start (see
  // trace_back).
  trace_dec_.assign(window_ + lookahead_, 0);
  delta_.assign(config_.reliability && !fixed_ ? window_ * S : 0, 0.0f);
  y_.assign(window_, 0.0f);
  if (fixed_) {
    fixed_tables_ = make_fixed_acs(trellis_.memory(), trellis_.output_row(0), trellis_.output_row(1));
    pmq_.assign(S, 0);
    yq_.assign(window_, 0);
    deltaq_.assign(config_.reliability ? window_ * S : 0, 0);
    const int m = trellis_.memory();
    fixed_lane_.resize(static_cast<size_t>(m) * S);
    for (int p = 0; p < m; ++p)
      for (int st = 0; st < S_; ++st)
        fixed_lane_[p * S + st] = static_cast<uint8_t>(fixed_lane_of(st, p, m));
  }
  erased_.assign(window_, 0);
  // Padded both sides: the SIMD SOVA kernel reads whole vectors around the window.
  const size_t padded = kPathPad + window_ + kSovaPad;
  path_state_.assign(padded, 0);
  path_branch_.assign(padded, 0);
  path_bit_.assign(padded, 0);
  path_rel_.assign(padded, 0.0f);
  path_dec_.assign(padded, 0);
  path_delta_.assign(padded, 0.0f);
  path_slot_.assign(window_, 0);
  // trace_levels' words plus room for trace_back()'s 8-byte reads.
  path_levels_.assign(window_ / 64 + 3, 0);
  // (m + 1)-bit window of survivor levels -> state | branch << 8 | NRZI bit << 9.
  const int m = trellis_.memory();
  path_code_.resize(2 * S);
  for (int v = 0; v < 2 * S_; ++v) {
    int state = 0;
    for (int i = 0; i < m; ++i) state |= ((v >> (1 + i)) & 1) << (m - 1 - i);
    const int bit = ((v >> m) ^ (v >> (m - 1))) & 1;
    path_code_[v] = static_cast<uint16_t>(state | (v & 1) << 8 | bit << 9);
  }
  pmf_.assign(S, 0.0f);
  out0f_.resize(S);
  out1f_.resize(S);
  for (int s = 0; s < S_; ++s) {
    out0f_[s] = static_cast<float>(trellis_.output(0, s));
    out1f_[s] = static_cast<float>(trellis_.output(1, s));
  }
  decided_noise_.assign(static_cast<size_t>(N_), 0.0);
  if (config_.kind == MetricKind::pattern_dependent) {
    const int mask = (1 << config_.pattern_bits) - 1;
    for (int j = 0; j < 2; ++j) {
      pattern_of_[j].resize(S);
      for (int s = 0; s < S_; ++s)
        pattern_of_[j][s] = static_cast<uint8_t>(trellis_.branch_word(j, s) & mask);
    }
  }
  install_tables();
}

void SequenceDetector::train(std::span<const float> samples, std::span<const uint8_t> known_bits,
                             int level_before) {
  if (samples.size() != known_bits.size())
    throw_usage("train", "samples (" + std::to_string(samples.size()) + ") and known bits (" +
                             std::to_string(known_bits.size()) + ") differ in length");
  if (level_before != 1 && level_before != -1)
    throw_usage("train", "level before bit 0 is " + std::to_string(level_before) +
                             ", not +1 or -1");
  for (size_t k = 0; k < samples.size(); ++k) {
    if (!std::isfinite(samples[k]))
      throw_input("train", "sample " + std::to_string(k) + " is not a finite number");
    if (known_bits[k] > 1)
      throw_input("train", "known bit " + std::to_string(k) + " is " +
                               std::to_string(known_bits[k]) + ", not 0 or 1");
  }
  if (config_.kind == MetricKind::euclidean) return;  // nothing to learn

  const auto& f = trellis_.taps();
  const int L = static_cast<int>(f.size());
  const int P = config_.kind == MetricKind::pattern_dependent ? config_.pattern_bits : 1;
  // Level x_k needs x_(k-L+1) (or x_(k-P+1) for a pattern) known; x_(-1) is level_before.
  const long first = std::max<long>({0, L - 2, P - 2});
  constexpr int kRing = 8;  // > max(L, P): levels x_k .. x_(k-7)
  double levels[kRing];     // levels[(k + 1) % kRing] = x_k (index 0 holds x_(-1))
  std::fill(levels, levels + kRing, 0.0);
  levels[0] = level_before;
  auto level_at = [&](long k) { return levels[((k + 1) % kRing + kRing) % kRing]; };
  std::vector<double> past(static_cast<size_t>(N_), 0.0);  // n_(k-1).., newest first
  int past_valid = 0;
  double x = level_before;
  for (long k = 0; k < static_cast<long>(samples.size()); ++k) {
    if (known_bits[k]) x = -x;
    levels[(k + 1) % kRing] = x;
    if (k < first) continue;
    double clean = 0.0;
    for (int i = 0; i < L; ++i) clean += f[i] * level_at(k - i);
    const double n_k = samples[k] - clean;
    if (past_valid >= N_) {
      if (config_.kind == MetricKind::noise_predictive) {
        np_estimator_.add(n_k, past);
      } else {
        int pattern = 0;
        for (int i = 0; i < P; ++i) pattern |= (level_at(k - i) > 0 ? 1 : 0) << i;
        pd_estimator_.add(pattern, n_k, past);
      }
    }
    if (N_ > 0) {
      std::rotate(past.rbegin(), past.rbegin() + 1, past.rend());
      past[0] = n_k;
      past_valid = std::min(N_, past_valid + 1);
    }
  }
  const size_t have = config_.kind == MetricKind::noise_predictive ? np_estimator_.count()
                                                                    : pd_estimator_.count();
  if (have == 0)
    throw_usage("train", "no usable training sample: " + std::to_string(samples.size()) +
                             " samples are too few for the target and predictor order");
  if (config_.kind == MetricKind::noise_predictive)
    predictor_ = np_estimator_.solve();
  else
    pattern_model_ = pd_estimator_.solve(32);  // fewer than 32 samples: pooled model
  trained_ = true;
  model_ready_ = true;
  install_tables();
}

void SequenceDetector::steps_float(size_t slot, size_t n) {
  float* delta = config_.reliability ? &delta_[slot * S_] : nullptr;
  const size_t phase = span_steps_ % kRenormInterval;
  if (euclidean_) {
    const EuclideanAcs t{S_, out0f_.data(), out1f_.data()};
    (config_.simd ? viterbi_euclidean_simd : viterbi_euclidean_scalar)(
        t, pmf_.data(), phase, &y_[slot], &erased_[slot], n, &decisions_[slot], delta);
  } else {
    PredictiveAcs t;
    t.states = S_;
    t.order = N_;
    const size_t S = static_cast<size_t>(S_), NS = static_cast<size_t>(N_) * S;
    for (int j = 0; j < 2; ++j) {
      t.out[j] = j ? out1f_.data() : out0f_.data();
      t.bias[j] = &metric_tables_[j * S];
      t.log_var[j] = &metric_tables_[(2 + j) * S];
      t.inv_var[j] = &metric_tables_[(4 + j) * S];
      t.coef[j] = &metric_tables_[6 * S + j * NS];
    }
    (config_.simd ? viterbi_predictive_simd : viterbi_predictive_scalar)(
        t, pmf_.data(), histf_.data(), phase, &y_[slot], &erased_[slot], n, &decisions_[slot],
        delta);
  }
  for (size_t k = 0; k < n; ++k) trace_dec_[slot + k] = trace_table_(decisions_[slot + k]);
  span_steps_ += n;
  count_ += n;
}

void SequenceDetector::steps_fixed(size_t slot, size_t n) {
  (config_.simd ? quantize_samples_simd : quantize_samples_scalar)(fixed_tables_, &y_[slot], n,
                                                                   &yq_[slot]);
  acs_fixed(slot, n);
}

void SequenceDetector::acs_fixed(size_t slot, size_t n) {
  uint16_t* delta = config_.reliability ? &deltaq_[slot * S_] : nullptr;
  // Without an erased sample in the run the kernel skips the per-step test.
  const uint8_t* erased = &erased_[slot];
  if (std::memchr(erased, 1, n) == nullptr) erased = nullptr;
  (config_.simd ? viterbi_fixed_simd : viterbi_fixed_scalar)(
      fixed_tables_, pmq_.data(), span_steps_, &yq_[slot], erased, n, &trace_dec_[slot], delta);
  span_steps_ += n;
  count_ += n;
}

int SequenceDetector::best_state() const {
  if (fixed_) return static_cast<int>(std::min_element(pmq_.begin(), pmq_.end()) - pmq_.begin());
  return static_cast<int>(std::min_element(pmf_.begin(), pmf_.end()) - pmf_.begin());
}

// Float per-branch tables of the installed noise model (or of the plain Euclidean metric
// when none is installed yet): bias, log variance, inverse variance, coefficients.
void SequenceDetector::install_tables() {
  if (euclidean_) return;
  const size_t S = static_cast<size_t>(S_), N = static_cast<size_t>(N_);
  metric_tables_.assign(6 * S + 2 * N * S, 0.0f);
  for (int j = 0; j < 2; ++j)
    for (size_t s = 0; s < S; ++s) {
      float bias = 0.0f, log_var = 0.0f, inv_var = 1.0f;
      float coef[kMaxPredictorOrder] = {0.0f, 0.0f, 0.0f, 0.0f};
      if (model_ready_ && config_.kind == MetricKind::noise_predictive) {
        for (size_t i = 0; i < N && i < predictor_.coef.size(); ++i)
          coef[i] = static_cast<float>(predictor_.coef[i]);
      } else if (model_ready_ && config_.kind == MetricKind::pattern_dependent) {
        const int c = pattern_of_[j][s];
        const PatternNoiseModel& m = pattern_model_;
        bias = static_cast<float>(m.bias[c]);
        log_var = static_cast<float>(m.log_variance[c]);
        inv_var = static_cast<float>(m.inv_variance[c]);
        for (size_t i = 0; i < N; ++i) coef[i] = static_cast<float>(m.coef[c * N + i]);
      }
      metric_tables_[j * S + s] = bias;
      metric_tables_[(2 + j) * S + s] = log_var;
      metric_tables_[(4 + j) * S + s] = inv_var;
      for (size_t i = 0; i < N; ++i) metric_tables_[6 * S + j * N * S + i * S + s] = coef[i];
    }
}

double SequenceDetector::llr_scale() const {
  if (model_ready_ && config_.kind == MetricKind::pattern_dependent) return 0.5;
  double var;
  if (model_ready_ && config_.kind == MetricKind::noise_predictive)
    var = predictor_.error_variance;
  else if (config_.noise_sigma > 0.0)
    var = config_.noise_sigma * config_.noise_sigma;
  else
    var = residual_count_ ? residual_sum_ / static_cast<double>(residual_count_) : 1.0;
  return 0.5 / std::max(var, 1e-12);
}

// Follows the best survivor back through the `n` steps of the window.
// Byte i of kSpreadBits[v] is bit i of v.
constexpr auto kSpreadBits = [] {
  std::array<uint64_t, 256> t{};
  for (int v = 0; v < 256; ++v)
    for (int i = 0; i < 8; ++i) t[v] |= static_cast<uint64_t>((v >> i) & 1) << (8 * i);
  return t;
}();

void SequenceDetector::trace_back(size_t n, size_t emit, size_t path_steps, size_t cut) {
  const int m = trellis_.memory();
  if (cut > 0) {
    // Two chains, cut where the pass took its guess (see segment_pass); the ring has room
    // after its end for a copy of the steps that wrap, so that they are one contiguous run.
    if (head_ + n > window_)
      std::copy_n(trace_dec_.data(), head_ + n - window_, trace_dec_.data() + window_);
    trace_levels_split(trace_dec_.data() + head_, n, m, best_state(), cut, mid_guess_, path_levels_.data());
  } else {
    trace_levels_ring(trace_dec_.data(), window_, head_, n, m, best_state(), path_levels_.data());
  }
  const uint8_t* level_bytes = reinterpret_cast<const uint8_t*>(path_levels_.data());
  uint8_t* nrzi = path_bit_.data() + kPathPad;
  // NRZI bits of the released steps, eight at a time: a_t = x_t xor x_(t-1), the level
  // bits t + m and t + m - 1 (the bit array and path_bit_ are padded for the overrun).
  for (size_t t = 0; t < emit; t += 8) {
    const size_t at = t + static_cast<size_t>(m) - 1;
    uint64_t x;
    std::memcpy(&x, level_bytes + (at >> 3), sizeof x);
    x >>= at & 7;
    const uint64_t spread = kSpreadBits[(x ^ (x >> 1)) & 0xff];
    std::memcpy(nrzi + t, &spread, sizeof spread);
  }
  if (path_steps == 0) return;
  uint16_t* slots = path_slot_.data();
  // The window is a ring: steps [0, first) sit at slots head_.., the rest from slot 0.
  const size_t first = std::min(n, window_ - head_);
  for (size_t t = 0; t < first; ++t) slots[t] = static_cast<uint16_t>(head_ + t);
  for (size_t t = first; t < n; ++t) slots[t] = static_cast<uint16_t>(t - first);
  // Survivor state, branch and NRZI bit of each step from the level bits: after step t
  // the levels at bits t .. t + m are x_(t-m) .. x_t (branch, then the state reversed).
  const int S = S_;
  const uint16_t* code = path_code_.data();
  // Local pointers: byte stores may alias anything, so members would be reloaded.
  uint8_t* states = path_state_.data() + kPathPad;
  uint8_t* branches = path_branch_.data() + kPathPad;
  const uint64_t window_mask = (uint64_t{2} << m) - 1;
  for (size_t t = 0; t < path_steps; ++t) {
    uint64_t x;
    std::memcpy(&x, level_bytes + (t >> 3), sizeof x);
    const uint16_t c = code[(x >> (t & 7)) & window_mask];
    states[t] = static_cast<uint8_t>(c);
    branches[t] = static_cast<uint8_t>((c >> 8) & 1);
    nrzi[t] = static_cast<uint8_t>(c >> 9);
  }
  if (config_.reliability) {  // the SOVA kernel reads state-ordered decisions
    uint32_t* dec = path_dec_.data() + kPathPad;
    if (fixed_) {
      // Bit reversal of the state index is its own inverse: the same table goes back.
      const uint64_t* table = trace_table_.table.data();
      const uint64_t* words = trace_dec_.data();
      auto convert = [&]<int kBytes>() {
        const uint64_t smask = S >= 32 ? 0xffffffffu : (uint64_t{1} << S) - 1;
        for (size_t t = 0; t < n; ++t) {
          const uint64_t w = words[slots[t]] & smask;
          uint64_t r = table[w & 0xff];
          for (int b = 1; b < kBytes; ++b) r |= table[b * 256 + ((w >> (8 * b)) & 0xff)];
          dec[t] = static_cast<uint32_t>(r & smask);
        }
      };
      if (S <= 8)
        convert.template operator()<1>();
      else if (S == 16)
        convert.template operator()<2>();
      else
        convert.template operator()<4>();
    } else {
      std::copy_n(decisions_.data() + head_, first, dec);
      std::copy_n(decisions_.data(), n - first, dec + first);
    }
  }
}

// Hagenauer-Hoeher update: each merge on the survivor lowers the reliability of the bits
// on which the competitor (followed back until it meets the survivor) disagrees. Only
// the first `emit` bits are released, so only merges that can reach them are followed
// (steps t < emit + window - 1), and a merge whose Delta is at or above the LLR cap
// cannot lower any released magnitude (min(cap, min(r, Delta) * scale) = min(cap,
// r * scale) when Delta * scale >= cap), so it is skipped.
void SequenceDetector::sova(size_t n, size_t emit, double scale) {
  const float inf = std::numeric_limits<float>::infinity();
  float* rel = path_rel_.data() + kPathPad;
  std::fill(rel, rel + n, inf);
  const size_t U = static_cast<size_t>(config_.reliability_window);
  const size_t last = std::min(n, emit + U - 1);
  const int S = S_;
  const uint8_t* states = path_state_.data() + kPathPad;
  const uint16_t* slots = path_slot_.data();
  float* delta = path_delta_.data() + kPathPad;
  if (fixed_) {
    // Fixed-point deltas are stored per lane; the lane layout turns with the span step
    // (the lane of state s after a step of phase p is fixed_lane_[p * S + s]).
    const size_t m = static_cast<size_t>(trellis_.memory());
    size_t phase = (span_steps_ - count_) % m;
    const float unit = fixed_tables_.metric_unit;
    const uint8_t* lane_of = fixed_lane_.data();
    for (size_t t = 0; t < last; ++t) {
      const float d = static_cast<float>(deltaq_[slots[t] * S + lane_of[phase * S + states[t]]]) * unit;
      const float choice[2] = {d, inf};
      delta[t] = choice[static_cast<double>(d) * scale >= kLlrCap];
      phase = phase + 1 == m ? 0 : phase + 1;
    }
  } else {
    for (size_t t = 0; t < last; ++t) {
      const float d = delta_[slots[t] * S + states[t]];
      const float choice[2] = {d, inf};  // indexed, not branched: about half are skipped
      delta[t] = choice[static_cast<double>(d) * scale >= kLlrCap];
    }
  }
  const SovaPath path{trellis_.memory(), path_dec_.data() + kPathPad, states,
                      path_branch_.data() + kPathPad, path_bit_.data() + kPathPad, delta};
  (config_.simd ? sova_simd : sova_scalar)(path, last, U, rel);
}

void SequenceDetector::release(size_t emit, std::span<uint8_t> bits, std::span<float> llr, size_t cut) {
  const size_t n = count_;
  // Survivor states and branches are needed by SOVA (up to the last merge it follows), by
  // the noise models and by the sigma estimate (the released steps); bits always.
  const size_t sova_last = std::min(n, emit + static_cast<size_t>(config_.reliability_window) - 1);
  const size_t path_steps = config_.reliability ? sova_last
                            : (!euclidean_ || config_.noise_sigma <= 0.0) ? emit
                                                                           : 0;
  trace_back(n, emit, path_steps, cut);
  // Estimates from the released part of the decided path.
  const bool adapting = config_.adapt && !trained_ && config_.kind != MetricKind::euclidean;
  // Local accumulators (same order of additions) keep the sums out of memory.
  double residual_sum = residual_sum_;
  size_t residual_count = residual_count_;
  // The Euclidean residual only serves the sigma estimate, unused when sigma is given.
  if (euclidean_ && config_.noise_sigma <= 0.0) {
    // No noise model: only the residual of the decided path (same sums as below).
    const double* out[2] = {trellis_.output_row(0), trellis_.output_row(1)};
    const uint16_t* slots = path_slot_.data();
    const uint8_t* states = path_state_.data() + kPathPad;
    const uint8_t* branches = path_branch_.data() + kPathPad;
    // Four partial sums break the chain of dependent additions; the grouping depends
    // only on the position in the block, so the sum is the same for any chunking.
    double part[4] = {0.0, 0.0, 0.0, 0.0};
    for (size_t t = 0; t < emit; ++t) {
      const size_t slot = slots[t];
      const double e = static_cast<double>(y_[slot]) - out[branches[t]][states[t]];
      const bool kept = erased_[slot] == 0;
      part[t & 3] += kept ? e * e : 0.0;
      residual_count += kept;
    }
    residual_sum += (part[0] + part[1]) + (part[2] + part[3]);
  }
  for (size_t t = 0; t < (euclidean_ ? 0 : emit); ++t) {
    const size_t slot = path_slot_[t];
    const int st = path_state_[kPathPad + t], j = path_branch_[kPathPad + t];
    const bool erased = erased_[slot] != 0;
    const double n_t = static_cast<double>(y_[slot]) - trellis_.output(j, st);
    double e = n_t;
    if (model_ready_ && config_.kind == MetricKind::noise_predictive) {
      for (int i = 0; i < N_; ++i) e -= predictor_.coef[i] * decided_noise_[i];
    } else if (model_ready_ && config_.kind == MetricKind::pattern_dependent) {
      const int c = pattern_of_[j][st];
      e -= pattern_model_.bias[c];
      for (int i = 0; i < N_; ++i) e -= pattern_model_.coef[c * N_ + i] * decided_noise_[i];
    }
    if (!erased) {
      residual_sum += e * e;
      ++residual_count;
      if (adapting && decided_valid_ >= N_) {
        if (config_.kind == MetricKind::noise_predictive)
          np_estimator_.add(n_t, decided_noise_);
        else
          pd_estimator_.add(pattern_of_[j][st], n_t, decided_noise_);
      }
    }
    if (N_ > 0) {
      std::rotate(decided_noise_.rbegin(), decided_noise_.rbegin() + 1, decided_noise_.rend());
      decided_noise_[0] = erased ? 0.0 : n_t;
      decided_valid_ = erased ? 0 : std::min(N_, decided_valid_ + 1);
    }
  }
  residual_sum_ = residual_sum;
  residual_count_ = residual_count;
  if (adapting) {
    const size_t have = config_.kind == MetricKind::noise_predictive ? np_estimator_.count()
                                                                      : pd_estimator_.count();
    if (have >= config_.adapt_min_samples) {
      if (config_.kind == MetricKind::noise_predictive)
        predictor_ = np_estimator_.solve();
      else
        pattern_model_ = pd_estimator_.solve(32);
      model_ready_ = true;
      install_tables();
    }
  }
  const double scale = llr_scale();
  if (config_.reliability) sova(n, emit, scale);
  double fixed = kLlrCap;
  if (!config_.reliability) {
    double var = config_.noise_sigma > 0.0 ? config_.noise_sigma * config_.noise_sigma
                 : residual_count_ ? residual_sum_ / static_cast<double>(residual_count_)
                                   : 1.0;
    fixed = std::min<double>(kLlrCap, 2.0 * d2min_ / std::max(var, 1e-12));
  }
  // Sign from the bit without a branch (the bits are random, a branch would mispredict).
  const uint8_t* __restrict decided = path_bit_.data() + kPathPad;
  float* __restrict out_llr = llr.data();
  if (config_.reliability) {
    const float* __restrict rel = path_rel_.data() + kPathPad;
    // In float, so that the loop vectorises (a double min compiles to a branch, and
    // whether a reliability reaches the cap is random).
    const auto scale_f = static_cast<float>(scale);
    for (size_t t = 0; t < emit; ++t) {
      const float mag = std::min(rel[t] * scale_f, kLlrCap);
      out_llr[t] = std::bit_cast<float>(std::bit_cast<uint32_t>(mag) |
                                        (static_cast<uint32_t>(decided[t] ^ 1u) << 31));
    }
  } else {
    const uint32_t mag = std::bit_cast<uint32_t>(static_cast<float>(fixed));
    for (size_t t = 0; t < emit; ++t)
      out_llr[t] = std::bit_cast<float>(mag | (static_cast<uint32_t>(decided[t] ^ 1u) << 31));
  }
  std::copy_n(decided, emit, bits.data());
  head_ = (head_ + emit) % window_;
  count_ -= emit;
}

Progress SequenceDetector::process(std::span<const float> samples,
                                   std::span<const uint8_t> erasure, std::span<uint8_t> bits,
                                   std::span<float> llr) {
  if (!erasure.empty() && erasure.size() != samples.size())
    throw_usage("process", "erasure flags (" + std::to_string(erasure.size()) +
                               ") and samples (" + std::to_string(samples.size()) +
                               ") differ in length");
  if (bits.size() != llr.size())
    throw_usage("process", "bit and llr buffers differ in length");
  refuse_unflagged_non_finite(samples, erasure);
  if (segments_) return process_segments(samples, erasure, bits, llr);
  const size_t R = release_;
  Progress p;
  {
    // Runs of steps up to the next release (or the end of the ring), in one kernel call.
    while (p.consumed < samples.size()) {
      const bool room = bits.size() - p.produced >= R;
      const size_t slot = (head_ + count_) % window_;
      size_t n = std::min({samples.size() - p.consumed, window_ - count_, window_ - slot});
      if (!room) n = std::min(n, window_ - 1 - count_);  // stop short of a release
      if (n == 0) break;
      store_run(slot, samples.data() + p.consumed, erasure.empty() ? nullptr : erasure.data() + p.consumed, n);
      if (fixed_)
        steps_fixed(slot, n);
      else
        steps_float(slot, n);
      p.consumed += n;
      if (count_ == window_) {
        release(R, bits.subspan(p.produced, R), llr.subspan(p.produced, R));
        p.produced += R;
      }
    }
  }
  return p;
}

void SequenceDetector::store_run(size_t slot, const float* samples, const uint8_t* erasure, size_t n) {
  float* ring_y = &y_[slot];
  uint8_t* ring_erased = &erased_[slot];
  if (erasure == nullptr) {
    std::copy_n(samples, n, ring_y);
    std::fill_n(ring_erased, n, uint8_t{0});
  } else {
    for (size_t i = 0; i < n; ++i) {
      const bool erased = erasure[i] != 0;
      ring_y[i] = erased ? 0.0f : samples[i];
      ring_erased[i] = erased ? 1 : 0;
    }
  }
}

size_t SequenceDetector::store_samples(std::span<const float> samples, std::span<const uint8_t> erasure,
                                       size_t from, bool room_for_pass) {
  const size_t H = kSegmentHalf;
  const size_t slot = (head_ + count_ + pending_) % window_;
  // The span's first H steps at once; after them, up to the 2 H that make a pass, or one
  // short of them while the output has no room for what the pass releases (so that at
  // most 3 H - 1 are held back and the pass still comes at the same step).
  const size_t room = count_ < H ? H - count_ : (room_for_pass ? 2 * H : 2 * H - 1) - pending_;
  if (room == 0) return 0;
  const size_t n = std::min({samples.size() - from, room, window_ - slot});
  store_run(slot, samples.data() + from, erasure.empty() ? nullptr : erasure.data() + from, n);
  (config_.simd ? quantize_samples_simd : quantize_samples_scalar)(fixed_tables_, &y_[slot], n, &yq_[slot]);
  if (count_ < H)
    acs_fixed(slot, n);
  else
    pending_ += n;
  return n;
}

Progress SequenceDetector::process_segments(std::span<const float> samples,
                                            std::span<const uint8_t> erasure,
                                            std::span<uint8_t> bits, std::span<float> llr) {
  const size_t H = kSegmentHalf;
  Progress p;
  for (;;) {
    if (count_ == H && pending_ == 2 * H) {
      if (bits.size() - p.produced < 2 * H) break;  // no room for what the pass releases
      segment_pass();
      release(2 * H, bits.subspan(p.produced, 2 * H), llr.subspan(p.produced, 2 * H), H + lookahead_);
      start_next_segment();
      p.produced += 2 * H;
      continue;
    }
    if (p.consumed == samples.size()) break;
    const size_t stored = store_samples(samples, erasure, p.consumed, bits.size() - p.produced >= 2 * H);
    if (stored == 0) break;  // held back to the limit: the caller must make output room
    p.consumed += stored;
  }
  return p;
}

// Lane A continues the current segment (span steps [s + H, s + 2H + W), s its first
// step); lane B starts the next at s + 2H - W with every state equally likely. Both have
// H + W steps and the same phases (H and W are multiples of the period). Their decisions
// go to the ring, except B's warm-up (discarded) and B's first W steps of its own
// segment, whose slots hold A's look-ahead until the release: those wait in next_*.
// The segment starts at slot 0 or 2H of the 4H ring, so the ring wraps, if at all, at A's
// step H or at B's step W: both are cuts below.
void SequenceDetector::segment_pass() {
  const size_t H = kSegmentHalf, W = lookahead_, S = static_cast<size_t>(S_);
  const size_t a0 = (head_ + H) % window_, b0 = (head_ + 2 * H - W) % window_;
  std::fill(pm_next_.begin(), pm_next_.end(), uint16_t{0});
  const bool rel = config_.reliability;
  auto erased_or_null = [&](size_t slot, size_t n) -> const uint8_t* {
    const uint8_t* e = &erased_[slot];
    return std::memchr(e, 1, n) == nullptr ? nullptr : e;
  };
  // Steps [k, k + n) of the pass; B's decisions and deltas to `b_dec` / `b_delta` if given.
  auto run = [&](size_t k, size_t n, uint64_t* b_dec, uint16_t* b_delta) {
    if (n == 0) return;
    const size_t sa = (a0 + k) % window_, sb = (b0 + k) % window_;
    FixedLane a, b;
    a.pm = pmq_.data();
    a.yq = &yq_[sa];
    a.erased = erased_or_null(sa, n);
    a.decisions = &trace_dec_[sa];
    a.delta = rel ? &deltaq_[sa * S] : nullptr;
    b.pm = pm_next_.data();
    b.yq = &yq_[sb];
    b.erased = erased_or_null(sb, n);
    b.decisions = b_dec ? b_dec : &trace_dec_[sb];
    b.delta = rel ? (b_delta ? b_delta : &deltaq_[sb * S]) : nullptr;
    (config_.simd ? viterbi_fixed_dual_simd : viterbi_fixed_dual_scalar)(fixed_tables_, span_steps_ + k, n, a, b);
  };
  run(0, W, warm_dec_.data(), rel ? warm_delta_.data() : nullptr);
  // The best state H + W steps into the segment: the traceback's guess of the survivor
  // there, which lets it run as two chains (trace_levels_split; exact either way).
  mid_guess_ = best_state();
  run(W, W, next_dec_.data(), rel ? next_delta_.data() : nullptr);
  run(2 * W, H - 2 * W, nullptr, nullptr);
  run(H, W, nullptr, nullptr);
  // The ring now holds the current segment and its look-ahead, its metrics in pmq_.
  span_steps_ += H + W;
  count_ += H + W;
  pending_ -= H + W;
}

void SequenceDetector::start_next_segment() {
  const size_t H = kSegmentHalf, W = lookahead_, S = static_cast<size_t>(S_);
  // count_ is W: the look-ahead's slots, which become the next segment's first steps.
  std::copy_n(next_dec_.data(), W, &trace_dec_[head_]);
  if (config_.reliability) std::copy_n(next_delta_.data(), W * S, &deltaq_[head_ * S]);
  pmq_ = pm_next_;
  count_ = H;
  span_steps_ += H - W;
  pending_ = 0;
}

size_t SequenceDetector::flush(std::span<uint8_t> bits, std::span<float> llr) {
  const size_t n = count_ + pending_;
  if (bits.size() < n || llr.size() < n)
    throw_usage("flush", "output room " + std::to_string(std::min(bits.size(), llr.size())) +
                             " is less than the " + std::to_string(n) + " bits held back");
  // Segments: the pending samples continue the current segment's trellis.
  while (pending_ > 0) {
    const size_t slot = (head_ + count_) % window_;
    const size_t run = std::min(pending_, window_ - slot);
    pending_ -= run;
    acs_fixed(slot, run);
  }
  if (n) release(n, bits, llr);
  clear_span();
  return n;
}

void SequenceDetector::clear_span() {
  std::fill(pmf_.begin(), pmf_.end(), 0.0f);
  std::fill(pmq_.begin(), pmq_.end(), uint16_t{0});
  span_steps_ = 0;
  std::fill(histf_.begin(), histf_.end(), 0.0f);
  std::fill(decided_noise_.begin(), decided_noise_.end(), 0.0);
  decided_valid_ = 0;
  head_ = 0;
  count_ = 0;
  pending_ = 0;
}

void SequenceDetector::reset() {
  clear_span();
  residual_sum_ = 0.0;
  residual_count_ = 0;
  if (!trained_) {
    model_ready_ = false;
    np_estimator_.clear();
    pd_estimator_.clear();
    predictor_ = LinearPredictor{};
    pattern_model_ = PatternNoiseModel{};
    install_tables();
  }
}

std::string SequenceDetector::describe() const {
  std::ostringstream o;
  switch (config_.kind) {
    case MetricKind::euclidean: o << "viterbi (euclidean metric)"; break;
    case MetricKind::noise_predictive:
      o << "noise-predictive viterbi, predictor order " << N_; break;
    case MetricKind::pattern_dependent:
      o << "pattern-dependent noise-predictive viterbi, pattern " << config_.pattern_bits
        << " levels, predictor order " << N_; break;
  }
  o << "; " << trellis_.describe() << "; traceback " << config_.traceback_depth << " bits";
  if (segments_) o << ", segments of " << 2 * kSegmentHalf << " steps two at a time";
  if (config_.reliability) o << ", SOVA window " << config_.reliability_window;
  if (config_.noise_sigma > 0.0) o << ", noise sigma " << config_.noise_sigma;
  else o << ", noise sigma estimated";
  if (config_.kind != MetricKind::euclidean)
    o << (trained_ ? ", trained" : config_.adapt ? ", decision-directed" : ", untrained");
  return o.str();
}

}  // namespace salvor::trellis
