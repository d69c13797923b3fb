// dfe: decision-feedback equalization, symbol by symbol (Austin, MIT RLE Tech. Rep. 461,
// 1967; Belfiore & Park, "Decision feedback equalization", Proc. IEEE 67(8), 1979;
// Bergmans, Digital Baseband Transmission and Recording, 1996, ch. 6).
//
// The input is the signal equalized towards the declared target (PR4 by default from the
// host), y_k ~ sum_m f_m a_{k-m} + noise. For each position k the detector forms
//     z_k = sum_{i<Nf} c_i y_{k+delta-i}  -  sum_{1<=j<=Nb} b_j a^_{k-j},    a^_k = sign(z_k)
// with delta = (Nf-1)/2: a feed-forward filter c and a feedback filter b that cancels the
// post-cursor interference of the past decisions. The NRZI bit is a^_k != a^_{k-1}.
//
// Taps: designed from the target (c = 1/f0 at the main tap, b_j = f_j / f0, the
// zero-forcing DFE for an exactly equalized input), then optionally trained by NLMS on
// known bits via train() (error a_k - z_k, feedback from the known levels; Haykin,
// Adaptive Filter Theory), and optionally adapted decision-directed in process().
// train() adapts the taps only; every process() span starts with empty history and takes
// the level before its first bit as -1 (the format's NRZI convention).
//
// Reliability: L_k = 2 z_k / s^2 for the level, s^2 the running mean of (z - a^)^2 (starts
// from (sigma/f0)^2 with the host's noise estimate, else 0.1: an assumption, no source);
// the NRZI bit takes the max-log combination llr_k = -sign(L_k L_{k-1}) min(|L_k|, |L_{k-1}|)
// (Hagenauer, Offer & Papke, IEEE Trans. IT 42(2), 1996, the "boxplus" approximation).
// Not calibrated (error propagation is ignored). Erased samples in the feed-forward window
// give L_k ~ 0 and no adaptation. Latency delta <= 7 bits.

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <vector>

#include "detect/plugin_support.hpp"

namespace {

using salvor::plugin::set_error;

constexpr size_t kMaxFf = 15;
constexpr size_t kMaxFb = 8;
constexpr size_t kMaxLatency = (kMaxFf - 1) / 2;
constexpr double kNlmsEps = 1e-9;
constexpr double kMaxLlr = 50.0;

const salvor_param_desc kParams[] = {
    {"ff_taps", SALVOR_PARAM_INT, 5, 1, kMaxFf, nullptr, "taps",
     "feed-forward filter length; the main tap (and the latency) is (ff_taps-1)/2"},
    {"fb_taps", SALVOR_PARAM_INT, 4, 0, kMaxFb, nullptr, "taps", "feedback filter length"},
    {"step_size", SALVOR_PARAM_REAL, 0.02, 1e-5, 1.0, nullptr, "", "NLMS step size for train() and adaptation"},
    {"adapt", SALVOR_PARAM_BOOL, 0, 0, 1, nullptr, "", "adapt the taps decision-directed while detecting"},
};

class Dfe {
 public:
  Dfe(const double* target, size_t target_len, double sigma, size_t nf, size_t nb, double mu, bool adapt)
      : nf_(nf), nb_(nb), delta_((nf - 1) / 2), mu_(mu), adapt_(adapt), c_(nf, 0.0), b_(nb, 0.0) {
    const double f0 = target[0];
    c_[delta_] = 1.0 / f0;
    for (size_t j = 1; j <= nb_ && j < target_len; ++j) b_[j - 1] = target[j] / f0;
    s2_initial_ = sigma > 0.0 ? (sigma / f0) * (sigma / f0) : 0.1;
    y_.assign(nf_, 0.0);
    bad_.assign(nf_, 1);
    a_.assign(std::max<size_t>(nb_, 1), -1);
    s2_ = s2_initial_;
    reset();
  }

  size_t latency() const { return delta_; }

  void reset() {
    std::fill(y_.begin(), y_.end(), 0.0);
    std::fill(bad_.begin(), bad_.end(), 1);
    std::fill(a_.begin(), a_.end(), -1);
    n_ = 0;
    prev_llr_ = -kMaxLlr;  // the level before the span is taken as -1 for sure
  }

  // NLMS on known levels: `levels` already derived from the known NRZI bits.
  void train(const float* samples, const int8_t* levels, size_t count) {
    for (size_t k = 0; k < count; ++k) {
      if (k + delta_ + 1 < nf_ || k + delta_ >= count || k < nb_) continue;  // window not complete
      double z = 0.0, energy = 0.0;
      for (size_t i = 0; i < nf_; ++i) {
        const double v = samples[k + delta_ - i];
        z += c_[i] * v;
        energy += v * v;
      }
      for (size_t j = 1; j <= nb_; ++j) {
        z -= b_[j - 1] * levels[k - j];
        energy += 1.0;
      }
      const double e = levels[k] - z;
      const double g = mu_ / (kNlmsEps + energy);
      for (size_t i = 0; i < nf_; ++i) c_[i] += g * e * samples[k + delta_ - i];
      for (size_t j = 1; j <= nb_; ++j) b_[j - 1] -= g * e * levels[k - j];
      s2_ += (e * e - s2_) / 256.0;
    }
  }

  // Takes one sample; decides position n - delta once it is in the window. `padding`
  // marks the zeros flush() feeds after the end of a span: they are not erasures, but
  // nothing adapts on them.
  void push(double v, bool erased, salvor_detector_output* out, bool padding) {
    std::move_backward(y_.begin(), y_.end() - 1, y_.end());
    std::move_backward(bad_.begin(), bad_.end() - 1, bad_.end());
    y_[0] = v;
    bad_[0] = erased;
    ++n_;
    if (n_ <= delta_) return;
    const size_t available = static_cast<size_t>(std::min<uint64_t>(n_, nf_));  // samples of this span
    double z = 0.0, energy = 0.0;
    bool clean = true;
    for (size_t i = 0; i < nf_; ++i) {
      z += c_[i] * y_[i];
      energy += y_[i] * y_[i];
      if (i < available && bad_[i]) clean = false;
    }
    for (size_t j = 1; j <= nb_; ++j) {
      z -= b_[j - 1] * a_[j - 1];
      energy += 1.0;
    }
    const int8_t decided = z >= 0.0 ? 1 : -1;
    const double e = decided - z;
    double level_llr = decided > 0 ? 1e-6 : -1e-6;  // erased: about zero, sign kept
    if (clean) {
      if (!padding) {
        s2_ += (e * e - s2_) / 256.0;
        if (adapt_) {
          const double g = mu_ / (kNlmsEps + energy);
          for (size_t i = 0; i < nf_; ++i) c_[i] += g * e * y_[i];
          for (size_t j = 1; j <= nb_; ++j) b_[j - 1] -= g * e * a_[j - 1];
        }
      }
      level_llr = std::clamp(2.0 * z / std::max(s2_, 1e-6), -kMaxLlr, kMaxLlr);
      if (level_llr == 0.0) level_llr = decided > 0 ? 1e-6 : -1e-6;
    }
    const int8_t previous = a_.empty() ? -1 : a_[0];
    const uint8_t bit = decided != previous ? 1 : 0;
    const double mag = std::min(std::fabs(level_llr), std::fabs(prev_llr_));
    out->bits[out->produced] = bit;
    out->llr[out->produced] = static_cast<float>(bit ? mag : -mag);
    ++out->produced;
    std::move_backward(a_.begin(), a_.end() - 1, a_.end());
    a_[0] = decided;
    prev_llr_ = level_llr;
  }

  void flush(salvor_detector_output* out) {
    const size_t pending = static_cast<size_t>(std::min<uint64_t>(n_, delta_));
    for (size_t k = 0; k < pending; ++k) push(0.0, false, out, true);
    reset();
  }

 private:
  size_t nf_, nb_, delta_;
  double mu_;
  bool adapt_;
  std::vector<double> c_;      // feed-forward taps, c_[i] multiplies y_{k+delta-i}
  std::vector<double> b_;      // feedback taps, b_[j-1] multiplies a^_{k-j}
  std::vector<double> y_;      // y_[i] = y_{n-1-i}: the newest sample first
  std::vector<uint8_t> bad_;   // erased flags of y_
  std::vector<int8_t> a_;      // a_[j-1] = a^_{k-j}: past decisions, newest first
  double s2_ = 0.1;            // running decision-error variance
  double s2_initial_ = 0.1;
  double prev_llr_ = 0.0;      // L_{k-1}
  uint64_t n_ = 0;             // samples taken in this span
};

bool valid_output(const salvor_detector_output* out, size_t need) {
  return out && out->bits && out->llr && out->capacity >= need;
}

int create(const salvor_detector_config* config, void** handle, char* err, size_t err_len) {
  return salvor::plugin::guarded(err, err_len, [&]() -> int {
    *handle = nullptr;
    if (!config || config->struct_size < sizeof(salvor_detector_config)) {
      set_error(err, err_len, "configuration is missing or too small");
      return SALVOR_E_PARAM;
    }
    if (!config->target || config->target_len == 0 || config->target[0] == 0.0) {
      set_error(err, err_len, "needs a target with a nonzero first tap f0");
      return SALVOR_E_PARAM;
    }
    using salvor::plugin::param_value;
    const auto nf = static_cast<size_t>(param_value(config, "ff_taps", 5));
    const auto nb = static_cast<size_t>(param_value(config, "fb_taps", 4));
    *handle = new Dfe(config->target, config->target_len, config->noise_sigma, nf, nb,
                      param_value(config, "step_size", 0.02), param_value(config, "adapt", 0) != 0.0);
    return SALVOR_OK;
  });
}

int train(void* handle, const float* samples, const uint8_t* known_bits, size_t count, int level_before, char* err,
          size_t err_len) {
  return salvor::plugin::guarded(err, err_len, [&]() -> int {
    if (count && (!samples || !known_bits)) {
      set_error(err, err_len, "training block is invalid");
      return SALVOR_E_INPUT;
    }
    std::vector<int8_t> levels(count);
    int8_t level = level_before >= 0 ? 1 : -1;
    for (size_t k = 0; k < count; ++k) {
      if (known_bits[k]) level = static_cast<int8_t>(-level);
      levels[k] = level;
    }
    static_cast<Dfe*>(handle)->train(samples, levels.data(), count);
    return SALVOR_OK;
  });
}

int process(void* handle, const salvor_detector_input* in, salvor_detector_output* out, char* err, size_t err_len) {
  return salvor::plugin::guarded(err, err_len, [&]() -> int {
    auto* d = static_cast<Dfe*>(handle);
    if (!in || (in->count && !in->samples) || !valid_output(out, in ? in->count + d->latency() : 0)) {
      set_error(err, err_len, "input or output block is invalid or too small");
      return SALVOR_E_INPUT;
    }
    out->produced = 0;
    for (size_t k = 0; k < in->count; ++k) {
      const float v = in->samples[k];
      const bool erased = (in->erasure && in->erasure[k]) || !std::isfinite(v);
      d->push(std::isfinite(v) ? v : 0.0, erased, out, false);
    }
    return SALVOR_OK;
  });
}

int flush(void* handle, salvor_detector_output* out, char* err, size_t err_len) {
  return salvor::plugin::guarded(err, err_len, [&]() -> int {
    auto* d = static_cast<Dfe*>(handle);
    if (!valid_output(out, d->latency())) {
      set_error(err, err_len, "output block is invalid or too small");
      return SALVOR_E_INPUT;
    }
    out->produced = 0;
    d->flush(out);
    return SALVOR_OK;
  });
}

void reset(void* handle) { static_cast<Dfe*>(handle)->reset(); }
void destroy(void* handle) { delete static_cast<Dfe*>(handle); }

const salvor_detector_api kApi = {
    SALVOR_DETECTOR_ABI_VERSION,
    sizeof(salvor_detector_api),
    "dfe",
    "1.0.0",
    "decision-feedback equalizer, symbol by symbol; taps from the target or trained on known bits",
    "PR4",
    0,
    kMaxLatency,
    kParams,
    sizeof kParams / sizeof kParams[0],
    create,
    train,
    process,
    flush,
    reset,
    destroy,
};

}  // namespace

extern "C" SALVOR_DETECTOR_EXPORT const salvor_detector_api* salvor_detector_entry(void) { return &kApi; }
