#include "timing/timing_loop.hpp"

#include <algorithm>
#include <bit>
#include <cmath>
#include <complex>
#include <cstdio>
#include <limits>

#include "common/error.hpp"
#include "timing/farrow.hpp"
#include "timing/prefilter.hpp"

namespace salvor::timing {

namespace {
constexpr double kPi = 3.14159265358979323846;
constexpr int kShortWindow = 16;  // bits for the amplitude / tone checks at mode changes (a power of two)
static_assert((kShortWindow & (kShortWindow - 1)) == 0);
// A locked loop restarts on a preamble only when the tone says it is this far off (bits);
// a locked loop's phase error at 20 dB is a few hundredths (common practice, no source).
constexpr double kReacquireShiftBits = 0.2;

double wrap_pi(double a) {
  while (a > kPi) a -= 2 * kPi;
  while (a <= -kPi) a += 2 * kPi;
  return a;
}

// EPR4 transition target (1 + D)^2 / 2 at offset n from its centre.
double epr4_target(int n) { return n == 0 ? 1.0 : (n == 1 || n == -1) ? 0.5 : 0.0; }

// Autocorrelation of the transition sequence b_k = (a_k - a_{k-1}) / 2 for i.i.d. +-1 levels.
double transition_autocorr(int m) { return m == 0 ? 0.5 : (m == 1 || m == -1) ? -0.25 : 0.0; }

void check(bool ok, const std::string& field, const std::string& what) {
  if (!ok) throw_usage("timing loop: " + field, what);
}
}  // namespace

const char* to_string(TimingState s) {
  switch (s) {
    case TimingState::search: return "search";
    case TimingState::acquire: return "acquire";
    case TimingState::track: return "track";
  }
  return "?";
}

TimingLoop::TimingLoop(const TimingLoopConfig& cfg) : cfg_(cfg) {
  check(std::isfinite(cfg.samples_per_bit) && cfg.samples_per_bit >= 2.0 && cfg.samples_per_bit <= 64.0,
        "samples_per_bit", "value " + std::to_string(cfg.samples_per_bit) + " must be in [2, 64]");
  check(cfg.max_rate_offset > 0 && cfg.max_rate_offset < 0.2, "max_rate_offset",
        "value " + std::to_string(cfg.max_rate_offset) + " must be in (0, 0.2)");
  check(std::fabs(cfg.initial_rate_offset) <= cfg.max_rate_offset, "initial_rate_offset",
        "value " + std::to_string(cfg.initial_rate_offset) + " exceeds max_rate_offset");
  check(cfg.detect_window >= 16 && cfg.detect_window <= 256 && cfg.detect_window % 8 == 0,
        "detect_window", "value " + std::to_string(cfg.detect_window) + " must be a multiple of 8 in [16, 256]");
  check(cfg.detect_threshold > 0.2 && cfg.detect_threshold < 1.0, "detect_threshold",
        "value " + std::to_string(cfg.detect_threshold) + " must be in (0.2, 1)");
  check(cfg.acquire_bits >= kShortWindow && cfg.acquire_bits <= 4096, "acquire_bits",
        "value " + std::to_string(cfg.acquire_bits) + " must be in [16, 4096]");
  check(cfg.lock_average_bits >= 4 && cfg.lock_average_bits <= 65536, "lock_average_bits",
        "value " + std::to_string(cfg.lock_average_bits) + " must be in [4, 65536]");
  check(cfg.min_signal_power > 0 && cfg.min_signal_power < 0.25, "min_signal_power",
        "value " + std::to_string(cfg.min_signal_power) + " must be in (0, 0.25)");
  check(cfg.max_error_power > 0 && cfg.max_error_power < 1, "max_error_power",
        "value " + std::to_string(cfg.max_error_power) + " must be in (0, 1)");
  check(cfg.trace_decimation >= 1, "trace_decimation", "must be at least 1");
  check(cfg.trace_capacity >= 1 && cfg.trace_capacity <= (1u << 24), "trace_capacity", "must be in [1, 2^24]");
  check(std::isfinite(cfg.position_offset) && std::isfinite(cfg.position_scale) && cfg.position_scale > 0,
        "position_scale", "must be finite and positive");
  check(cfg.prefilter_step >= 0 && cfg.prefilter_step < 1, "prefilter_step",
        "value " + std::to_string(cfg.prefilter_step) + " must be in [0, 1)");
  check(cfg.acquire_bandwidth > cfg.track_bandwidth, "acquire_bandwidth",
        "must be wider than track_bandwidth");
  acquire_gains_ = pi_loop_gains(cfg.acquire_bandwidth, cfg.damping);
  track_gains_ = pi_loop_gains(cfg.track_bandwidth, cfg.damping);
  // Reference clock for the slip count: a quarter of the tracking bandwidth, critically
  // damped (common practice, no source).
  reference_gains_ = pi_loop_gains(cfg.track_bandwidth / 4, 1.0);

  // Regularisation 0.01 of the unit-peak pulse energy scale: limits noise enhancement
  // (common practice, no source).
  fir_ = design_epr4_prefilter(cfg.pw50_bits, cfg.prefilter_taps, 0.01);

  // S-curve slope of z_k = q_k d_{k-1} - q_{k-1} d_k for i.i.d. channel bits, unit gain:
  // E[z](tau) = sum_{j,l} R_b(j-l) [p(-j+tau) t(-1-c-l) - p(-1-j+tau) t(-c-l)].
  const int c = (cfg.prefilter_taps - 1) / 2;
  auto s_curve = [&](double tau) {
    double s = 0;
    for (int l = -c - 3; l <= -c + 2; ++l) {
      for (int j = l - 1; j <= l + 1; ++j) {
        const double r = transition_autocorr(j - l);
        s += r * (prefiltered_transition(fir_, cfg.pw50_bits, -j + tau) * epr4_target(-1 - c - l) -
                  prefiltered_transition(fir_, cfg.pw50_bits, -1 - j + tau) * epr4_target(-c - l));
      }
    }
    return s;
  };
  data_slope_ = (s_curve(0.02) - s_curve(-0.02)) / 0.04;
  if (!(std::fabs(data_slope_) > 1e-3)) throw_internal("timing loop: data detector has no slope");
  reset();
}

void TimingLoop::set_track_scales() {
  inv_gain_ = 1.0 / data_gain_;
  inv_error_scale_ = 1.0 / (data_gain_ * data_gain_ * data_slope_);
  inv_lock_average_ = 1.0 / cfg_.lock_average_bits;
  inv_spb_ = 1.0 / cfg_.samples_per_bit;
  rate_limit_ = 1.0 - 1.0 / (1.0 + cfg_.max_rate_offset);
}

void TimingLoop::reset() {
  size_t cap = 1;
  // Room for the interpolator's reach back (about 2 bits) plus a block of input taken ahead.
  while (cap < size_t(std::ceil(4 * cfg_.samples_per_bit)) + 16 + kInputBlock) cap *= 2;
  hist_.assign(cap, 0.0);
  hist_mask_ = int64_t(cap) - 1;
  newest_ = -1;
  next_time_ = 1.0 + cfg_.samples_per_bit / 2;
  prev_time_ = next_time_ - cfg_.samples_per_bit;
  rate_int_ = 1.0 - 1.0 / (1.0 + cfg_.initial_rate_offset);
  recent_.assign(size_t(2 * cfg_.detect_window), 0.0);
  recent_n_ = recent_.size();
  recent_count_ = 0;
  recent_slot_ = 0;
  detect_old_half_ = detect_new_half_ = 0;
  detect_energy_ = 0;
  bits_since_recompute_ = 0;
  fir_line_.assign(2 * fir_.size(), 0.0);
  fir_pos_ = 0;
  // The design is symmetric up to rounding; make it exactly so, as the folded prefilter
  // below (and the tracking update, which keeps it symmetric) assume.
  taps_ = fir_;
  for (size_t i = 0; i < taps_.size() / 2; ++i)
    taps_[i] = taps_[taps_.size() - 1 - i] = 0.5 * (taps_[i] + taps_[taps_.size() - 1 - i]);
  nt_ = taps_.size();
  line_power_ = 0;
  bits_since_power_ = 0;
  recent_q_.assign(kShortWindow, 0.0);
  prev_y_ = prev_dy_ = prev_q_ = prev_dq_ = 0;
  tone_amp_ = data_gain_ = 1;
  set_track_scales();
  sig_pow_ = err_pow_ = 0;
  pending_shift_ = 0;
  ref_time_ = ref_rate_ = 0;
  trace_err2_ = 0;
  trace_n_ = 0;
  trace_.clear();
  events_.clear();
  stats_ = TimingStats{};
  state_ = TimingState::search;
  state_bits_ = 0;
  detect_run_ = 0;
  reacquiring_ = false;
  stats_.rate_offset = cfg_.initial_rate_offset;
}

std::string TimingLoop::describe() const {
  char buf[400];
  std::snprintf(buf, sizeof buf,
                "timing loop: %.3f samples/bit, BnT acquire %.4g track %.4g, zeta %.3f, "
                "EPR4 prefilter %d taps at PW50 %.2f bits (NLMS step %.3g), preamble window %d bits "
                "(threshold %.2f), acquire %d bits",
                cfg_.samples_per_bit, cfg_.acquire_bandwidth, cfg_.track_bandwidth, cfg_.damping,
                cfg_.prefilter_taps, cfg_.pw50_bits, cfg_.prefilter_step, cfg_.detect_window,
                cfg_.detect_threshold, cfg_.acquire_bits);
  return buf;
}

namespace {
// floor() as an index; instants are >= 0, where truncation is floor and needs no library call.
inline int64_t floor_index(double t) { return t >= 0 ? int64_t(t) : int64_t(std::floor(t)); }
}  // namespace

[[gnu::always_inline]] inline double TimingLoop::sample_at(int64_t index) const {
  const int64_t cap = int64_t(hist_.size());
  if (index < 0) return 0.0;  // before the capture: zeros
  if (index > newest_ || index <= newest_ - cap) throw_internal("timing loop: history underrun");
  return hist_[size_t(index & hist_mask_)];
}

[[gnu::always_inline]] inline double TimingLoop::interpolate(double t) const {
  // Instants are >= 0 after the first bit; truncation is floor there (and cheaper).
  const double m = t >= 0 ? double(int64_t(t)) : std::floor(t);
  const int64_t mi = int64_t(m);
  if (mi >= 1 && mi + 2 <= newest_ && mi - 1 > newest_ - (hist_mask_ + 1)) {  // the usual case
    const double* h = hist_.data();
    return farrow_cubic({h[(mi - 1) & hist_mask_], h[mi & hist_mask_], h[(mi + 1) & hist_mask_],
                         h[(mi + 2) & hist_mask_]},
                        t - m);
  }
  return farrow_cubic({sample_at(mi - 1), sample_at(mi), sample_at(mi + 1), sample_at(mi + 2)}, t - m);
}

Progress TimingLoop::process(std::span<const float> in, std::span<BitSample> out) {
  Progress p;
  for (;;) {
    // Produce every bit whose four interpolation samples are present.
    while (p.produced < out.size() && floor_index(next_time_) + 2 <= newest_) {
      // The default 11-tap prefilter has its loops unrolled at compile time.
      if (nt_ == 11)
        produce_one<5>(out[p.produced++]);
      else
        produce_one<0>(out[p.produced++]);
    }
    if (p.produced == out.size() && floor_index(next_time_) + 2 <= newest_) break;
    if (p.consumed == in.size()) break;
    // Take up to kInputBlock samples at once (checked in one pass, copied in one loop)
    // rather than one per turn; the bits come out the same, only sooner in the input.
    const size_t n = std::min(kInputBlock, in.size() - p.consumed);
    const float* x = in.data() + p.consumed;
    // A float is not finite when its exponent bits are all set: an integer test on the bit
    // patterns, which the compiler vectorises.
    uint32_t non_finite = 0;
    for (size_t i = 0; i < n; ++i) non_finite |= uint32_t((std::bit_cast<uint32_t>(x[i]) & 0x7f800000u) == 0x7f800000u);
    if (non_finite) {
      for (size_t i = 0; i < n; ++i)
        if (!std::isfinite(x[i]))
          throw_input("timing loop", "non-finite sample at input index " + std::to_string(newest_ + 1 + int64_t(i)));
    }
    // Into the ring in at most two contiguous runs (loops the compiler vectorises).
    double* h = hist_.data();
    const size_t start = size_t((newest_ + 1) & hist_mask_);
    const size_t first = std::min(n, hist_.size() - start);
    for (size_t i = 0; i < first; ++i) h[start + i] = x[i];
    for (size_t i = first; i < n; ++i) h[i - first] = x[i];
    newest_ += int64_t(n);
    p.consumed += n;
  }
  return p;
}

namespace {
// sum += y e^{-i pi k / 2}: one real addition or subtraction (the rotation is a quarter turn).
// Branch-free: the part k & 1 (0 real, 1 imaginary) gains sign(k) y, and adding -y is
// subtracting y, to the bit.
inline void add_rotated(std::complex<double>& sum, double y, uint64_t k) {
  static constexpr double kSign[4] = {1.0, -1.0, -1.0, 1.0};
  double* c = reinterpret_cast<double*>(&sum);  // [real, imaginary], as the standard lays it out
  c[k & 1] += kSign[k & 3] * y;
}

// e^{-i pi k / 2} for k mod 4.
std::complex<double> quarter_turn(uint64_t k) {
  constexpr double r[4][2] = {{1, 0}, {0, -1}, {-1, 0}, {0, 1}};
  return {r[k & 3][0], r[k & 3][1]};
}
}  // namespace

void TimingLoop::exact_detection_sums(std::complex<double>& old_half, std::complex<double>& new_half,
                                      double& energy) const {
  const uint64_t n = recent_.size();
  const uint64_t w = uint64_t(cfg_.detect_window);
  old_half = new_half = 0;
  energy = 0;
  // Absolute indices k = recent_count_ - w .. recent_count_ - 1 (zeros before the first bit).
  for (uint64_t j = 0; j < w; ++j) {
    if (recent_count_ + j < w) continue;
    const uint64_t k = recent_count_ - w + j;
    const double y = recent_[k % n];
    energy += y * y;
    (j < w / 2 ? old_half : new_half) += y * quarter_turn(k);
  }
}

// sum_i a[i] * b[-i] (or a[-i] * b[-i] when both_reversed), in four partial sums so that
// the additions do not wait on one another.
static inline double reversed_dot(const double* a, const double* b, size_t n, bool both_reversed = false) {
  double s0 = 0, s1 = 0, s2 = 0, s3 = 0;
  const ptrdiff_t sa = both_reversed ? -1 : 1;
  size_t i = 0;
  for (; i + 4 <= n; i += 4) {
    const ptrdiff_t k = ptrdiff_t(i);
    s0 += a[sa * k] * b[-k];
    s1 += a[sa * (k + 1)] * b[-(k + 1)];
    s2 += a[sa * (k + 2)] * b[-(k + 2)];
    s3 += a[sa * (k + 3)] * b[-(k + 3)];
  }
  for (; i < n; ++i) s0 += a[sa * ptrdiff_t(i)] * b[-ptrdiff_t(i)];
  return (s0 + s1) + (s2 + s3);
}

void TimingLoop::recompute_detection_sums() {
  exact_detection_sums(detect_old_half_, detect_new_half_, detect_energy_);
  bits_since_recompute_ = 0;
}

[[gnu::always_inline]] inline void TimingLoop::slide_detection_window(double y) {
  const uint64_t n = recent_n_;  // 2 * detect_window
  const uint64_t w = uint64_t(cfg_.detect_window);
  const uint64_t k = recent_count_;
  // Slot of k in the ring, kept by wrapping instead of k % n (a 64-bit division per bit).
  const uint64_t slot = recent_slot_;
  recent_[slot] = y;
  ++recent_count_;
  recent_slot_ = slot + 1 == n ? 0 : slot + 1;
  auto slot_back = [&](uint64_t d) { return slot >= d ? slot - d : slot + n - d; };  // slot of k - d
  // Exact sums now and then, so that rounding cannot accumulate over a long capture.
  if (++bits_since_recompute_ >= 4096) {
    recompute_detection_sums();
    return;
  }
  add_rotated(detect_new_half_, y, k);
  detect_energy_ += y * y;
  if (k >= w / 2) {  // the sample that moves from the newer half to the older one
    const uint64_t m = k - w / 2;
    const double v = recent_[slot_back(w / 2)];
    add_rotated(detect_new_half_, -v, m);
    add_rotated(detect_old_half_, v, m);
  }
  if (k >= w) {  // the sample that leaves the window
    const uint64_t m = k - w;
    const double old = recent_[slot_back(w)];
    add_rotated(detect_old_half_, -old, m);
    detect_energy_ -= old * old;
  }
}

[[gnu::always_inline]] inline bool TimingLoop::detect_preamble(double& ratio) const {
  // Energy fraction of the newest detect_window bit samples in the DFT bin at 1/(4T),
  // computed on two halves so that a frequency offset does not smear the line. The sums
  // are kept running by slide_detection_window().
  const double w = double(cfg_.detect_window);
  std::complex<double> x1 = detect_old_half_, x2 = detect_new_half_;
  double energy = detect_energy_;
  // Near silence the running sums are mostly rounding: use the exact ones.
  if (energy < 1e-6 * w) exact_detection_sums(x1, x2, energy);
  if (energy <= 0) {
    ratio = 0;
    return false;
  }
  // ratio > threshold compared as a product (this runs every bit); the ratio itself is
  // only worked out when the line is there.
  const double line = 2.0 * (std::norm(x1) + std::norm(x2));
  if (!(line > cfg_.detect_threshold * energy * w / 2.0)) {
    ratio = 0;
    return false;
  }
  ratio = line / (energy * w / 2.0);
  return true;
}

bool TimingLoop::zero_phase_start(double min_shift_bits) {
  const size_t w = recent_.size();
  std::complex<double> x1 = 0, x2 = 0;
  // Reference every sample to the newest one (index w-1): phase of y_j =
  // A cos(pi/2 (1+eps) (j - (w-1)) + phi_end).
  for (size_t j = 0; j < w; ++j) {
    const double y = recent_[(recent_count_ + j) % w];
    const double ang = -kPi / 2 * double(int(j) - int(w - 1));
    (j < w / 2 ? x1 : x2) += y * std::polar(1.0, ang);
  }
  const double half = double(w / 2);
  double eps = wrap_pi(std::arg(x2) - std::arg(x1)) / (kPi / 2 * half);
  // Shrink the frequency estimate by its noise (Wiener-style eps^2 / (eps^2 + var)): a
  // short window on a noisy preamble would otherwise detune a clock that was right.
  // Per half of n samples with tone amplitude A and noise variance s2, the phase has
  // standard deviation sqrt(2 s2 / n) / A; the difference of two halves sqrt(2) of that.
  double energy = 0;
  for (double y : recent_) energy += y * y;
  const double amp = 2.0 * (std::abs(x1) + std::abs(x2)) / double(w);
  const double noise_var = std::max(energy / double(w) - amp * amp / 2, 1e-12 * energy / double(w));
  const double sd_eps = std::sqrt(2.0) * std::sqrt(2.0 * noise_var / half) / std::max(amp, 1e-12) / (kPi / 2 * half);
  eps *= eps * eps / (eps * eps + sd_eps * sd_eps);
  eps = std::clamp(eps, -0.03, 0.03);
  // arg(x2) is the phase at the centre of the second half; extrapolate to the newest sample.
  const double phi_end = std::arg(x2) + kPi / 2 * eps * (half - 1) / 2;
  // With the corrected period one step advances the tone by exactly pi/2, so the next
  // instant lands on the grid when shifted by the residual of phi_end modulo pi/2.
  const double rho = phi_end - kPi / 2 * std::round(phi_end / (kPi / 2));
  // While locked, a small residual means the loop is right: leave it alone (the loop's
  // own estimate is better than one preamble's).
  if (std::fabs(rho) * (2 / kPi) < min_shift_bits) return false;
  const double step_old = next_time_ - prev_time_;  // next_time_ is still the current instant
  pending_shift_ = -rho * (2 / kPi) * step_old / (1 + eps);
  const double r_new = 1.0 - (1.0 - rate_int_) / (1.0 + eps);
  rate_int_ = std::clamp(r_new, -rate_limit_, rate_limit_);
  tone_amp_ = std::max(2.0 * (std::abs(x1) + std::abs(x2)) / double(w), 1e-12);
  prev_y_ = 0;
  prev_dy_ = 0;
  ++stats_.acquisitions;
  return true;
}

void TimingLoop::enter_search() {
  if (state_ == TimingState::track || reacquiring_) {
    ++stats_.lock_losses;
    push_event({stats_.bits, cfg_.position_offset + cfg_.position_scale * prev_time_, false});
  }
  state_ = TimingState::search;
  state_bits_ = 0;
  detect_run_ = 0;
  reacquiring_ = false;
}

void TimingLoop::enter_track(double t) {
  // G from the prefilter output over the last bits of preamble: EPR4 levels 0, +-G.
  double e = 0;
  for (double q : recent_q_) e += q * q;
  data_gain_ = std::max(std::sqrt(2.0 * e / double(recent_q_.size())), 1e-12);
  set_track_scales();
  sig_pow_ = 0.5;
  err_pow_ = 0;
  prev_q_ = prev_dq_ = 0;
  ref_time_ = t + cfg_.samples_per_bit * (1.0 - rate_int_);  // the reference's next instant
  ref_rate_ = rate_int_;
  state_ = TimingState::track;
  state_bits_ = 0;
  detect_run_ = 0;
  // a re-acquisition on the next preamble while locked is no new lock
  if (!reacquiring_) push_event({stats_.bits, cfg_.position_offset + cfg_.position_scale * t, true});
  reacquiring_ = false;
}

template <size_t kHalfTaps>
void TimingLoop::produce_one(BitSample& out) {
  const double spb = cfg_.samples_per_bit;
  const double t = next_time_;
  const double y = interpolate(t);
  const double ymid = cfg_.midpoints ? interpolate(0.5 * (t + prev_time_)) : 0.0;

  slide_detection_window(y);

  // prefilter (runs in every mode so that its delay line is full when tracking starts)
  const size_t nt = kHalfTaps ? 2 * kHalfTaps + 1 : nt_;  // == nt_
  const double leaving = fir_line_[fir_pos_];  // y_{k-nt}, overwritten now
  fir_line_[fir_pos_] = y;
  fir_line_[fir_pos_ + nt] = y;
  const double* newest = fir_line_.data() + fir_pos_ + nt;  // newest[-i] = y_{k-i}
  auto line = [&](size_t i) { return newest[-ptrdiff_t(i)]; };
  // Symmetric taps: fold the line, f_i = y_{k-i} + y_{k-(nt-1-i)} (the tracking update's
  // gradient too), and take the part that does not wait for this bit's interpolation
  // first, since y_k is on the loop's bit-to-bit critical path.
  const size_t half = kHalfTaps ? kHalfTaps : nt / 2;
  double fold[32];
  for (size_t i = 1; i < half; ++i) fold[i] = line(i) + line(nt - 1 - i);
  fold[half] = line(half);
  double older = taps_[0] * line(nt - 1);
  for (size_t i = 1; i <= half; ++i) older += taps_[i] * fold[i];
  const double q = older + taps_[0] * y;
  fold[0] = y + line(nt - 1);
  // Line power for the tracking update, kept running (exact again every 1024 bits).
  line_power_ += y * y - leaving * leaving;
  if (++bits_since_power_ >= 1024) {
    line_power_ = reversed_dot(newest, newest, nt, true);
    bits_since_power_ = 0;
  }
  recent_q_[stats_.bits & (kShortWindow - 1)] = q;  // kShortWindow is a power of two

  double e = 0;  // timing error, bits, positive = late
  const LoopGains* gains = nullptr;
  ++state_bits_;
  switch (state_) {
    case TimingState::search: {
      // Detection fires while the detection window's oldest part may still hold the bits
      // before the preamble; the zero-phase start (over twice the detection window, for
      // a better frequency estimate) waits until its whole window is tone.
      double ratio = 0;
      if (state_bits_ >= cfg_.detect_window && detect_preamble(ratio)) {
        // detection needs about 3/4 of a window of tone; the ZPS window is twice as long
        if (++detect_run_ > int(recent_n_) - (3 * cfg_.detect_window) / 4) {
          zero_phase_start(0.0);
          state_ = TimingState::acquire;
          state_bits_ = 0;
          detect_run_ = 0;
        }
      } else {
        detect_run_ = 0;
      }
      break;
    }
    case TimingState::acquire: {
      const double p = tone_amp_;
      const double d = std::fabs(y) > p / 2 ? std::copysign(p, y) : 0.0;
      // Mueller-Mueller on the tone: E[z] = -P^2 sin(pi tau / 2) -> slope -P^2 pi/2 per bit.
      const double z = y * prev_dy_ - prev_y_ * d;
      e = std::clamp(z / (-p * p * kPi / 2), -0.5, 0.5);
      prev_y_ = y;
      prev_dy_ = d;
      gains = &acquire_gains_;
      if (state_bits_ >= kShortWindow) {
        // Is the tone still there over the last 16 bits? (the preamble may end early)
        std::complex<double> x = 0;
        double en = 0;
        const size_t w = recent_.size();
        for (int j = 0; j < kShortWindow; ++j) {
          const double v = recent_[(recent_count_ + w - 1 - size_t(j)) % w];
          en += v * v;
          const std::complex<double> rot[4] = {{1, 0}, {0, 1}, {-1, 0}, {0, -1}};
          x += v * rot[j % 4];
        }
        const double ratio = en > 0 ? std::norm(x) / (en * kShortWindow / 2.0) : 0.0;
        if (ratio < 0.5 || state_bits_ >= cfg_.acquire_bits) {
          if (ratio >= 0.5 || state_bits_ >= 2 * kShortWindow || reacquiring_) {
            enter_track(t);
          } else {
            enter_search();
          }
        }
      }
      break;
    }
    case TimingState::track: {
      // Divisions by constants of the lock are products by reciprocals kept since
      // enter_track(): a division costs several multiplies on this bit-by-bit path.
      const double g = data_gain_;
      const double u = q * inv_gain_;
      // EPR4 levels 0, +-1/2, +-1: the nearest (ties away from zero, as std::round of 2u),
      // counted from comparisons into an integer: no branch (the data are random, so a
      // branch on them would be mispredicted about every other bit).
      const int level = int(u >= 0.25) + int(u >= 0.75) - int(u <= -0.25) - int(u <= -0.75);
      static constexpr double kHalfLevels[5] = {-1.0, -0.5, 0.0, 0.5, 1.0};
      const double ud = kHalfLevels[level + 2];
      const double d = g * ud;
      const double z = q * prev_dq_ - prev_q_ * d;
      e = std::clamp(z * inv_error_scale_, -0.5, 0.5);
      prev_q_ = q;
      prev_dq_ = d;
      // Decision-directed NLMS on the prefilter towards the EPR4 levels, keeping the taps
      // symmetric so that the filter cannot absorb a timing offset (the detector's zero
      // stays at the transition instant); G stays at its preamble value, the taps follow
      // the amplitude. Adapts the in-loop filter to the real PW50 (Widrow & Hoff 1960;
      // normalised step as in Haykin, Adaptive Filter Theory).
      if (cfg_.prefilter_step > 0) {
        const double mu = cfg_.prefilter_step * g / std::max(line_power_, 1e-12);
        const double err = q - d;
        // Only taps 0..half are kept (the dot above folds the mirror image in); halving the
        // step first is exact, so each update is the bits of mu err fold / 2.
        const double me = mu * err;
        const double me_half = me * 0.5;
        double* w = taps_.data();
        for (size_t i = 0; i < half; ++i) w[i] -= me_half * fold[i];
        w[half] -= me * fold[half];
      }
      const double a = inv_lock_average_;
      sig_pow_ += a * (u * u - sig_pow_);
      err_pow_ += a * ((u - ud) * (u - ud) - err_pow_);
      gains = &track_gains_;
      ++stats_.locked_bits;
      // cycle-slip reference clock: follows the sampling instants with a slower PI loop
      const double dev = (t - ref_time_) * inv_spb_;  // bits, positive: loop later than reference
      if (std::fabs(dev) > 0.5) {
        ++stats_.cycle_slips;
        ref_time_ += std::copysign(spb * (1.0 - ref_rate_), dev);
      }
      const double er = (ref_time_ - t) * inv_spb_;
      ref_rate_ += reference_gains_.integral * er;
      ref_time_ += spb * (1.0 - ref_rate_ - reference_gains_.proportional * er);
      if (sig_pow_ < cfg_.min_signal_power || err_pow_ > cfg_.max_error_power) {
        enter_search();
        break;
      }
      // Every sector's preamble restarts the loop (zero-phase start and a wide loop
      // again), as a read channel acquires each sector on its own: an error the narrow
      // loop gathered in the sector before cannot run on into the next one.
      // (Not in the first bits of tracking: the rest of the preamble just acquired and a
      // sync mark may look like tone for a few bits.)
      double ratio = 0;
      if (state_bits_ > 4 * cfg_.detect_window && detect_preamble(ratio)) {
        if (++detect_run_ > int(recent_n_) - (3 * cfg_.detect_window) / 4) {
          detect_run_ = -(1 << 30);  // once per preamble
          if (zero_phase_start(kReacquireShiftBits)) {
            state_ = TimingState::acquire;
            state_bits_ = 0;
            detect_run_ = 0;
            reacquiring_ = true;
          }
        }
      } else {
        detect_run_ = 0;
      }
      break;
    }
  }

  fir_pos_ = fir_pos_ + 1 == nt ? 0 : fir_pos_ + 1;

  // loop filter and NCO: step = spb (1 - integrator - K1 e)
  double step = spb * (1.0 - rate_int_);
  if (gains) {
    rate_int_ = std::clamp(rate_int_ + gains->integral * e, -rate_limit_, rate_limit_);
    step = spb * (1.0 - rate_int_ - gains->proportional * e);
  }
  const double rate_offset = 1.0 / (1.0 - rate_int_) - 1.0;

  out.value = float(y);
  out.midpoint = float(ymid);
  out.position = cfg_.position_offset + cfg_.position_scale * t;
  out.phase_error = float(e);
  out.rate_offset = float(rate_offset);
  out.state = state_;

  ++stats_.bits;
  stats_.rate_offset = rate_offset;
  stats_.state = state_;
  trace_err2_ += e * e;
  ++trace_n_;
  if (trace_n_ >= cfg_.trace_decimation) {
    push_trace({stats_.bits - 1, out.position, rate_offset, std::sqrt(trace_err2_ / trace_n_), state_});
    trace_err2_ = 0;
    trace_n_ = 0;
  }

  // A zero-phase start in this bit moves the next instant onto the preamble's grid.
  prev_time_ = t;
  next_time_ = t + step + pending_shift_;
  pending_shift_ = 0;
}

void TimingLoop::push_trace(const TimingTracePoint& p) {
  if (trace_.size() >= cfg_.trace_capacity) {
    trace_.pop_front();
    ++stats_.trace_dropped;
  }
  trace_.push_back(p);
}

void TimingLoop::push_event(const LockEvent& e) {
  if (events_.size() >= cfg_.trace_capacity) {
    events_.pop_front();
    ++stats_.trace_dropped;
  }
  events_.push_back(e);
}

void TimingLoop::drain_trace(std::vector<TimingTracePoint>& dst) {
  dst.insert(dst.end(), trace_.begin(), trace_.end());
  trace_.clear();
}

void TimingLoop::drain_events(std::vector<LockEvent>& dst) {
  dst.insert(dst.end(), events_.begin(), events_.end());
  events_.clear();
}

}  // namespace salvor::timing
