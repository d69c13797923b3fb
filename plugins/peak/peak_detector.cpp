// peak: amplitude-qualified peak detection, the pre-PRML baseline, on the UNEQUALIZED
// bit-spaced readback (target "none").
//
// In longitudinal recording every written transition gives an isolated pulse of
// alternating polarity (Lorentzian, h(t) = 1/(1 + (2t/PW50)^2)); a peak detector finds
// the pulse peaks (zero crossings of the derivative), qualifies each with an amplitude
// threshold so that noise and shoulders do not count, and puts a 1 in the bit window that
// holds the peak. It "barely works at PW50/T ratios above 1" (Taratorin, Characterization
// of Magnetic Recording Systems, 2004, ch. 9), which is why PRML replaced it.
//
// With one sample per bit the derivative is the difference of neighbours: sample k is a
// positive peak when x_{k-1} <= x_k > x_{k+1} (negative peaks mirrored). The peak instant
// is refined by a parabola through the three samples (offset in (-1/2, 1/2]); the bit
// window of bit m spans [m - 1/2 + phase, m + 1/2 + phase) in bit periods.
// Qualification: |x_k| > threshold * level, where level is a peak hold of the pulse
// amplitudes with an exponential decay (time constant `level_hold` bits) or, until the
// first pulse, `initial_level`. Threshold fraction 0.4: common practice, no source.
// Reliability: llr = 4 (|x_k| - thr) / level for a 1 (the peak's margin over the
// threshold), -4 (thr - |x_m|) / level for a 0 (how far the window's sample stays below
// it, at least a small negative value), clamped to +-30. Not a calibrated LLR.
// Erased samples: no peak is taken from them, they do not move the level, and their
// windows (and their neighbours', whose peak test they spoil) get llr ~ 0. Latency: 2 bits.

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <vector>

#include "detect/plugin_support.hpp"

namespace {

using salvor::plugin::set_error;

constexpr size_t kLatency = 2;
constexpr float kMaxLlr = 30.0f;
constexpr float kWeakLlr = 1e-3f;  // a 0 whose sample is above threshold but is no peak

const salvor_param_desc kParams[] = {
    {"threshold", SALVOR_PARAM_REAL, 0.4, 0.05, 0.95, nullptr, "of the peak level",
     "a peak counts when its magnitude exceeds this fraction of the running peak level"},
    {"level_hold", SALVOR_PARAM_INT, 512, 8, 1048576, nullptr, "bits",
     "time constant of the decay of the peak-level hold"},
    {"initial_level", SALVOR_PARAM_REAL, 0.0, 0.0, 1e6, nullptr, "",
     "peak level before the first pulse is seen; 0 = learn it from the first extremum"},
    {"window_phase", SALVOR_PARAM_REAL, 0.0, -0.5, 0.5, nullptr, "bits",
     "where the bit windows start relative to the sample instants"},
};

struct Window {  // one bit window still open
  bool peak = false;
  float llr = 0.0f;  // meaningful once the window is final
  bool erased = false;
};

class PeakDetector {
 public:
  PeakDetector(double threshold, double hold, double initial_level, double phase)
      : threshold_(threshold), decay_(std::exp(-1.0 / hold)), initial_level_(initial_level), phase_(phase) {
    reset();
  }

  void reset() {
    level_ = initial_level_;
    n_ = 0;
    emitted_ = 0;
    x_newest_ = 0;
    std::fill(std::begin(x_), std::end(x_), 0.0);
    std::fill(std::begin(bad_), std::end(bad_), true);
    for (auto& w : win_) w = Window{};
  }

  // Takes sample n; evaluates candidate n-1; emits the bits that can no longer change.
  void push(double x, bool erased, salvor_detector_output* out) {
    x_[0] = x_[1];
    x_[1] = x_[2];
    x_[2] = x;
    bad_[0] = bad_[1];
    bad_[1] = bad_[2];
    bad_[2] = erased;
    x_newest_ = n_;
    win(n_) = Window{};
    win(n_).erased = erased;
    if (!erased) level_ *= decay_;  // the hold decays per bit; erased samples leave it alone
    if (n_ >= 1) evaluate(n_ - 1);
    ++n_;
    // Candidate n (next call) can only reach windows >= n - 1: everything below is final.
    while (n_ >= kLatency && emitted_ + kLatency < n_) emit(out);
  }

  void flush(salvor_detector_output* out) {
    if (n_ >= 1) {
      // The last sample's right neighbour lies beyond the span: take it as zero.
      x_[0] = x_[1];
      x_[1] = x_[2];
      x_[2] = 0.0;
      bad_[0] = bad_[1];
      bad_[1] = bad_[2];
      bad_[2] = false;
      x_newest_ = n_;
      win(n_) = Window{};
      evaluate(n_ - 1);
    }
    while (emitted_ < n_) emit(out);
    const double keep_level = level_;
    reset();
    level_ = keep_level;  // the level carries over to the next span
  }

 private:
  Window& win(uint64_t m) { return win_[m % kRing]; }

  void evaluate(uint64_t k) {  // candidate k sits at x_[1]
    if (bad_[1]) return;
    const double a = x_[0], b = x_[1], c = x_[2];
    const bool left_ok = k >= 1 && !bad_[0];
    // A flagged neighbour makes the peak test unreliable: the window keeps its decision
    // but gets llr ~ 0, like the flagged sample's own window.
    if ((k >= 1 && bad_[0]) || bad_[2]) win(k).erased = true;
    const double left = left_ok ? a : 0.0;
    const bool positive = b > 0.0 && b >= left && b > c;
    const bool negative = b < 0.0 && b <= left && b < c;
    if (!positive && !negative) return;
    const double magnitude = std::fabs(b);
    if (level_ <= 0.0) level_ = magnitude;  // first extremum sets the level
    const double thr = threshold_ * level_;
    level_ = std::max(level_, magnitude);
    if (magnitude <= thr) return;
    // Parabolic refinement of the peak instant within (-1/2, 1/2].
    const double curvature = left - 2.0 * b + c;
    double offset = curvature != 0.0 ? 0.5 * (left - c) / curvature : 0.0;
    offset = std::clamp(offset, -0.5, 0.5);
    const double instant = static_cast<double>(k) + offset;
    const double m_real = std::floor(instant - phase_ + 0.5);
    if (m_real < 0.0) return;
    const auto m = static_cast<uint64_t>(m_real);
    if (m < emitted_ || m > n_) return;  // outside the open windows (cannot happen with |phase| <= 1/2)
    Window& w = win(m);
    const auto llr = static_cast<float>(std::min<double>(kMaxLlr, 4.0 * (magnitude - thr) / level_));
    if (!w.peak || llr > w.llr) w.llr = std::max(llr, kWeakLlr);
    w.peak = true;
  }

  void emit(salvor_detector_output* out) {
    const uint64_t m = emitted_++;
    Window& w = win(m);
    uint8_t bit = w.peak ? 1 : 0;
    float llr;
    if (w.erased) {
      llr = salvor::plugin::erased_llr(bit);
    } else if (w.peak) {
      llr = w.llr;
    } else {
      llr = zero_llr(m);
    }
    out->bits[out->produced] = bit;
    out->llr[out->produced] = llr;
    ++out->produced;
  }

  float zero_llr(uint64_t m) const {
    // Bit m is emitted once sample m + 2 is in x_ (in flush: one of the three newest).
    const uint64_t back = x_newest_ - m;
    const double xm = back <= 2 ? x_[2 - back] : 0.0;
    const double thr = threshold_ * (level_ > 0.0 ? level_ : 1.0);
    const double margin = thr - std::fabs(xm);
    const double scaled = 4.0 * margin / (level_ > 0.0 ? level_ : 1.0);
    return -static_cast<float>(std::clamp<double>(scaled, kWeakLlr, kMaxLlr));
  }

  static constexpr size_t kRing = 8;
  double threshold_;       // qualification fraction of the level
  double decay_;           // per-bit decay of the level hold
  double initial_level_;   // level at the start (0: learn)
  double phase_;           // bit window phase, bits
  double level_ = 0.0;     // running peak level
  double x_[3] = {0, 0, 0};        // x_{n-2}, x_{n-1}, x_n
  bool bad_[3] = {true, true, true};  // erased flags of x_
  Window win_[kRing];      // open bit windows by index mod kRing
  uint64_t n_ = 0;         // samples taken in this span
  uint64_t emitted_ = 0;   // bits emitted in this span
  uint64_t x_newest_ = 0;  // sample index held in x_[2]
};

int create(const salvor_detector_config* config, void** handle, char* err, size_t err_len) {
  return salvor::plugin::guarded(err, err_len, [&]() -> int {
    *handle = nullptr;
    if (!config || config->struct_size < sizeof(salvor_detector_config)) {
      set_error(err, err_len, "configuration is missing or too small");
      return SALVOR_E_PARAM;
    }
    using salvor::plugin::param_value;
    *handle = new PeakDetector(param_value(config, "threshold", 0.4), param_value(config, "level_hold", 512),
                               param_value(config, "initial_level", 0.0), param_value(config, "window_phase", 0.0));
    return SALVOR_OK;
  });
}

bool valid_output(const salvor_detector_output* out, size_t need) {
  return out && out->bits && out->llr && out->capacity >= need;
}

int process(void* handle, const salvor_detector_input* in, salvor_detector_output* out, char* err, size_t err_len) {
  return salvor::plugin::guarded(err, err_len, [&]() -> int {
    if (!in || (in->count && !in->samples) || !valid_output(out, in ? in->count + kLatency : 0)) {
      set_error(err, err_len, "input or output block is invalid or too small");
      return SALVOR_E_INPUT;
    }
    auto* d = static_cast<PeakDetector*>(handle);
    out->produced = 0;
    for (size_t k = 0; k < in->count; ++k) {
      const float v = in->samples[k];
      const bool erased = (in->erasure && in->erasure[k]) || !std::isfinite(v);
      d->push(std::isfinite(v) ? v : 0.0, erased, out);
    }
    return SALVOR_OK;
  });
}

int flush(void* handle, salvor_detector_output* out, char* err, size_t err_len) {
  return salvor::plugin::guarded(err, err_len, [&]() -> int {
    if (!valid_output(out, kLatency)) {
      set_error(err, err_len, "output block is invalid or too small");
      return SALVOR_E_INPUT;
    }
    out->produced = 0;
    static_cast<PeakDetector*>(handle)->flush(out);
    return SALVOR_OK;
  });
}

void reset(void* handle) { static_cast<PeakDetector*>(handle)->reset(); }
void destroy(void* handle) { delete static_cast<PeakDetector*>(handle); }

const salvor_detector_api kApi = {
    SALVOR_DETECTOR_ABI_VERSION,
    sizeof(salvor_detector_api),
    "peak",
    "1.0.0",
    "amplitude-qualified peak detection on the unequalized signal (the pre-PRML baseline)",
    "none",
    0,
    kLatency,
    kParams,
    sizeof kParams / sizeof kParams[0],
    create,
    nullptr,
    process,
    flush,
    reset,
    destroy,
};

}  // namespace

extern "C" SALVOR_DETECTOR_EXPORT const salvor_detector_api* salvor_detector_entry(void) { return &kApi; }
