#include "trellis/sequence_detector.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <sstream>

#include "common/error.hpp"

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
      window_(2 * static_cast<size_t>(config.traceback_depth)),
      d2min_(min_squared_distance(target)),
      np_estimator_(config.kind == MetricKind::noise_predictive ? N_ : 0),
      pd_estimator_(config.kind == MetricKind::pattern_dependent ? N_ : 0,
                    config.kind == MetricKind::pattern_dependent ? config.pattern_bits : 1) {
  const size_t S = static_cast<size_t>(S_);
  pm_.assign(S, 0.0);
  pm_next_.assign(S, 0.0);
  hist_.assign(static_cast<size_t>(N_) * S, 0.0);
  hist_next_.assign(hist_.size(), 0.0);
  branch_scratch_.assign(std::max<size_t>(S, trellis_.distinct_outputs().size()), 0.0);
  decisions_.assign(window_, 0);
  delta_.assign(config_.reliability ? window_ * S : 0, 0.0f);
  y_.assign(window_, 0.0f);
  erased_.assign(window_, 0);
  path_state_.assign(window_, 0);
  path_branch_.assign(window_, 0);
  path_bit_.assign(window_, 0);
  path_rel_.assign(window_, 0.0f);
  decided_noise_.assign(static_cast<size_t>(N_), 0.0);
  if (config_.kind == MetricKind::pattern_dependent) {
    const int mask = (1 << config_.pattern_bits) - 1;
    for (int j = 0; j < 2; ++j) {
      pattern_of_[j].resize(S);
      for (int s = 0; s < S_; ++s)
        pattern_of_[j][s] = static_cast<uint8_t>(trellis_.branch_word(j, s) & mask);
    }
  }
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
}

void SequenceDetector::step(float y, bool erased) {
  const int S = S_;
  const uint8_t* p0 = trellis_.pred_row(0);
  const uint8_t* p1 = trellis_.pred_row(1);
  const double* o0 = trellis_.output_row(0);
  const double* o1 = trellis_.output_row(1);
  const size_t slot = (head_ + count_) % window_;
  float* delta = config_.reliability ? &delta_[slot * S] : nullptr;
  uint32_t dec = 0;

  // Branch metric of branch (j, s) from predecessor p.
  double* scratch = branch_scratch_.data();
  const bool use_model = model_ready_ && config_.kind != MetricKind::euclidean;
  if (!erased && !use_model) {
    // Once per distinct noiseless output.
    const auto& distinct = trellis_.distinct_outputs();
    for (size_t d = 0; d < distinct.size(); ++d) {
      const double e = y - distinct[d];
      scratch[d] = e * e;
    }
  } else if (!erased && config_.kind == MetricKind::noise_predictive) {
    // Predicted noise of each predecessor's survivor, once per state.
    for (int s = 0; s < S; ++s) {
      double acc = 0.0;
      for (int i = 0; i < N_; ++i) acc += predictor_.coef[i] * hist_[i * S + s];
      scratch[s] = acc;
    }
  }
  auto metric = [&](int j, int s, int p, double out) -> double {
    if (erased) return 0.0;
    if (!use_model) return scratch[trellis_.output_index(j, s)];
    if (config_.kind == MetricKind::noise_predictive) {
      const double e = y - out - scratch[p];
      return e * e;
    }
    const int c = pattern_of_[j][s];
    const PatternNoiseModel& m = pattern_model_;
    double e = y - out - m.bias[c];
    for (int i = 0; i < N_; ++i) e -= m.coef[c * N_ + i] * hist_[i * S + p];
    return m.log_variance[c] + e * e * m.inv_variance[c];
  };

  double best = std::numeric_limits<double>::infinity();
  for (int s = 0; s < S; ++s) {
    const int a = p0[s], b = p1[s];
    const double m0 = pm_[a] + metric(0, s, a, o0[s]);
    const double m1 = pm_[b] + metric(1, s, b, o1[s]);
    const bool take1 = m1 < m0;  // ties keep branch 0: deterministic
    const double m = take1 ? m1 : m0;
    pm_next_[s] = m;
    best = std::min(best, m);
    dec |= static_cast<uint32_t>(take1) << s;
    if (delta) delta[s] = static_cast<float>(std::abs(m0 - m1));
    if (N_ > 0) {
      const int p = take1 ? b : a;
      hist_next_[s] = erased ? 0.0 : y - (take1 ? o1[s] : o0[s]);
      for (int i = 1; i < N_; ++i) hist_next_[i * S + s] = hist_[(i - 1) * S + p];
    }
  }
  for (int s = 0; s < S; ++s) pm_next_[s] -= best;  // renormalise
  pm_.swap(pm_next_);
  if (N_ > 0) hist_.swap(hist_next_);
  decisions_[slot] = dec;
  y_[slot] = y;
  erased_[slot] = erased ? 1 : 0;
  ++count_;
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

void SequenceDetector::release(size_t emit, std::span<uint8_t> bits, std::span<float> llr) {
  const size_t n = count_;
  const int S = S_;
  // Trace the best survivor back through the whole window.
  int s = static_cast<int>(std::min_element(pm_.begin(), pm_.end()) - pm_.begin());
  for (size_t t = n; t-- > 0;) {
    const size_t slot = (head_ + t) % window_;
    const int j = (decisions_[slot] >> s) & 1;
    path_state_[t] = static_cast<uint8_t>(s);
    path_branch_[t] = static_cast<uint8_t>(j);
    path_bit_[t] = trellis_.nrzi(j, s);
    s = trellis_.pred(j, s);
  }
  // Hagenauer-Hoeher update: each merge on the survivor lowers the reliability of the
  // bits on which the competitor (followed back until it meets the survivor) disagrees.
  if (config_.reliability) {
    const float inf = std::numeric_limits<float>::infinity();
    std::fill(path_rel_.begin(), path_rel_.begin() + static_cast<long>(n), inf);
    const size_t U = static_cast<size_t>(config_.reliability_window);
    for (size_t t = n; t-- > 0;) {
      const size_t slot = (head_ + t) % window_;
      const int st = path_state_[t];
      const int jc = 1 - path_branch_[t];
      const float d = delta_[slot * S + st];
      if (trellis_.nrzi(jc, st) != path_bit_[t]) path_rel_[t] = std::min(path_rel_[t], d);
      int c = trellis_.pred(jc, st);
      const size_t stop = t + 1 > U ? t + 1 - U : 0;
      for (size_t u = t; u-- > stop;) {
        if (c == path_state_[u]) break;  // merged: the rest agrees
        const size_t su = (head_ + u) % window_;
        const int jj = (decisions_[su] >> c) & 1;
        if (trellis_.nrzi(jj, c) != path_bit_[u]) path_rel_[u] = std::min(path_rel_[u], d);
        c = trellis_.pred(jj, c);
      }
    }
  }
  // Estimates from the released part of the decided path.
  const bool adapting = config_.adapt && !trained_ && config_.kind != MetricKind::euclidean;
  for (size_t t = 0; t < emit; ++t) {
    const size_t slot = (head_ + t) % window_;
    const int st = path_state_[t], j = path_branch_[t];
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
      residual_sum_ += e * e;
      ++residual_count_;
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
  if (adapting) {
    const size_t have = config_.kind == MetricKind::noise_predictive ? np_estimator_.count()
                                                                      : pd_estimator_.count();
    if (have >= config_.adapt_min_samples) {
      if (config_.kind == MetricKind::noise_predictive)
        predictor_ = np_estimator_.solve();
      else
        pattern_model_ = pd_estimator_.solve(32);
      model_ready_ = true;
    }
  }
  const double scale = llr_scale();
  double fixed = kLlrCap;
  if (!config_.reliability) {
    double var = config_.noise_sigma > 0.0 ? config_.noise_sigma * config_.noise_sigma
                 : residual_count_ ? residual_sum_ / static_cast<double>(residual_count_)
                                   : 1.0;
    fixed = std::min<double>(kLlrCap, 2.0 * d2min_ / std::max(var, 1e-12));
  }
  for (size_t t = 0; t < emit; ++t) {
    bits[t] = path_bit_[t];
    double mag = config_.reliability ? std::min<double>(kLlrCap, path_rel_[t] * scale) : fixed;
    llr[t] = static_cast<float>(path_bit_[t] ? mag : -mag);
  }
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
  for (size_t k = 0; k < samples.size(); ++k)
    if (!std::isfinite(samples[k]) && (erasure.empty() || !erasure[k]))
      throw_input("detector input", "sample " + std::to_string(k) + " of the block is not a finite number");
  const size_t D = static_cast<size_t>(config_.traceback_depth);
  Progress p;
  for (; p.consumed < samples.size(); ++p.consumed) {
    if (count_ + 1 == window_ && bits.size() - p.produced < D) break;  // no room to release
    const bool erased = !erasure.empty() && erasure[p.consumed] != 0;
    step(erased ? 0.0f : samples[p.consumed], erased);
    if (count_ == window_) {
      release(D, bits.subspan(p.produced, D), llr.subspan(p.produced, D));
      p.produced += D;
    }
  }
  return p;
}

size_t SequenceDetector::flush(std::span<uint8_t> bits, std::span<float> llr) {
  const size_t n = count_;
  if (bits.size() < n || llr.size() < n)
    throw_usage("flush", "output room " + std::to_string(std::min(bits.size(), llr.size())) +
                             " is less than the " + std::to_string(n) + " bits held back");
  if (n) release(n, bits, llr);
  clear_span();
  return n;
}

void SequenceDetector::clear_span() {
  std::fill(pm_.begin(), pm_.end(), 0.0);
  std::fill(hist_.begin(), hist_.end(), 0.0);
  std::fill(decided_noise_.begin(), decided_noise_.end(), 0.0);
  decided_valid_ = 0;
  head_ = 0;
  count_ = 0;
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
  if (config_.reliability) o << ", SOVA window " << config_.reliability_window;
  if (config_.noise_sigma > 0.0) o << ", noise sigma " << config_.noise_sigma;
  else o << ", noise sigma estimated";
  if (config_.kind != MetricKind::euclidean)
    o << (trained_ ? ", trained" : config_.adapt ? ", decision-directed" : ", untrained");
  return o.str();
}

}  // namespace salvor::trellis
