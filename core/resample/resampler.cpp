#include "resample/resampler.hpp"

#include <algorithm>
#include <cmath>
#include <complex>
#include <cstring>
#include <sstream>

#include "common/error.hpp"

namespace salvor {
namespace {

constexpr double pi = 3.14159265358979323846;
constexpr size_t block_samples = 4096;  // input appended per refill beyond the taps

double sinc(double x) { return x == 0.0 ? 1.0 : std::sin(pi * x) / (pi * x); }

void validate(const ResamplerConfig& c) {
  const std::string where = "resampler";
  if (!(c.input_rate_hz > 0.0) || !std::isfinite(c.input_rate_hz))
    throw_usage(where + ".input_rate_hz", "must be a positive finite rate, got " + std::to_string(c.input_rate_hz));
  if (!(c.output_rate_hz > 0.0) || !std::isfinite(c.output_rate_hz))
    throw_usage(where + ".output_rate_hz", "must be a positive finite rate, got " + std::to_string(c.output_rate_hz));
  const double ratio = c.input_rate_hz / c.output_rate_hz;
  if (ratio > 256.0 || ratio < 1.0 / 256.0)
    throw_usage(where + ".output_rate_hz", "ratio input/output " + std::to_string(ratio) + " is outside [1/256, 256]");
  if (!(c.passband_edge > 0.0) || !(c.passband_edge < c.stopband_edge))
    throw_usage(where + ".passband_edge", "must be in (0, stopband_edge), got " + std::to_string(c.passband_edge));
  if (!(c.stopband_edge <= 1.0))
    throw_usage(where + ".stopband_edge", "must be <= 1.0 of the lower Nyquist, got " + std::to_string(c.stopband_edge));
  if (!(c.stopband_attenuation_db >= 40.0 && c.stopband_attenuation_db <= 160.0))
    throw_usage(where + ".stopband_attenuation_db", "must be in [40, 160], got " + std::to_string(c.stopband_attenuation_db));
  if (c.phases < 16 || c.phases > 8192)
    throw_usage(where + ".phases", "must be in [16, 8192], got " + std::to_string(c.phases));
  if (!(c.first_output_position >= 0.0) || !std::isfinite(c.first_output_position))
    throw_usage(where + ".first_output_position", "must be >= 0, got " + std::to_string(c.first_output_position));
  if (!std::isfinite(c.flag_reach))
    throw_usage(where + ".flag_reach", "must be finite");
}

}  // namespace

double bessel_i0(double x) {
  // Power series sum_k ((x/2)^k / k!)^2; converges for all x, terms fall fast past k > x.
  double sum = 1.0, term = 1.0;
  const double q = x * x / 4.0;
  for (int k = 1; k < 500; ++k) {
    term *= q / (static_cast<double>(k) * k);
    sum += term;
    if (term < sum * 1e-17) break;
  }
  return sum;
}

double kaiser_beta(double a) {
  if (a > 50.0) return 0.1102 * (a - 8.7);
  if (a >= 21.0) return 0.5842 * std::pow(a - 21.0, 0.4) + 0.07886 * (a - 21.0);
  return 0.0;
}

ResamplerConfig ResamplerConfig::for_bit_rate(double input_rate_hz, double bit_rate_hz,
                                              double samples_per_bit) {
  if (!(bit_rate_hz > 0.0) || !std::isfinite(bit_rate_hz))
    throw_usage("resampler.bit_rate_hz", "must be a positive finite rate, got " + std::to_string(bit_rate_hz));
  if (!(samples_per_bit >= 1.0 && samples_per_bit <= 64.0))
    throw_usage("resampler.samples_per_bit", "must be in [1, 64], got " + std::to_string(samples_per_bit));
  ResamplerConfig c;
  c.input_rate_hz = input_rate_hz;
  c.output_rate_hz = samples_per_bit * bit_rate_hz;
  return c;
}

Resampler::Resampler(const ResamplerConfig& config) {
  validate(config);
  spec_.ratio = config.input_rate_hz / config.output_rate_hz;
  const double lower_nyquist = 0.5 / std::max(1.0, spec_.ratio);  // cycles per input sample
  spec_.passband_edge = config.passband_edge * lower_nyquist;
  spec_.stopband_edge = config.stopband_edge * lower_nyquist;
  spec_.cutoff = 0.5 * (spec_.passband_edge + spec_.stopband_edge);
  spec_.kaiser_beta = kaiser_beta(config.stopband_attenuation_db);
  const double dw = 2.0 * pi * (spec_.stopband_edge - spec_.passband_edge);
  const double order = (config.stopband_attenuation_db - 8.0) / (2.285 * dw);
  int taps = static_cast<int>(std::ceil(order)) + 1;
  taps += taps % 2;
  spec_.taps = taps;
  spec_.phases = config.phases;
  first_position_ = config.first_output_position;
  const int half = taps / 2;
  flag_reach_ = config.flag_reach < 0.0 ? std::max(1.0, spec_.ratio) : config.flag_reach;
  flag_reach_ = std::min(flag_reach_, static_cast<double>(half - 1));

  // Table row p holds h(mu_p - j) for mu_p = p / phases and j = -half+1 .. half, where
  // h(d) = 2 fc sinc(2 fc d) w(d) and w is the Kaiser window over |d| <= half.
  const int rows = config.phases + 1;
  table_.assign(static_cast<size_t>(rows) * taps, 0.0f);
  delta_.assign(static_cast<size_t>(config.phases) * taps, 0.0f);
  const double i0_beta = bessel_i0(spec_.kaiser_beta);
  std::vector<double> row(taps);
  for (int p = 0; p < rows; ++p) {
    const double mu = static_cast<double>(p) / config.phases;
    double sum = 0.0;
    for (int jj = 0; jj < taps; ++jj) {
      const int j = jj - half + 1;
      const double d = mu - j;
      const double r = d / half;
      const double w = std::abs(r) >= 1.0 ? 0.0 : bessel_i0(spec_.kaiser_beta * std::sqrt(1.0 - r * r)) / i0_beta;
      row[jj] = 2.0 * spec_.cutoff * sinc(2.0 * spec_.cutoff * d) * w;
      sum += row[jj];
    }
    // Each phase passes DC exactly (the sums differ from 1 only by the stopband ripple).
    for (int jj = 0; jj < taps; ++jj) table_[static_cast<size_t>(p) * taps + jj] = static_cast<float>(row[jj] / sum);
  }
  for (int p = 0; p < config.phases; ++p)
    for (int jj = 0; jj < taps; ++jj)
      delta_[static_cast<size_t>(p) * taps + jj] =
          table_[static_cast<size_t>(p + 1) * taps + jj] - table_[static_cast<size_t>(p) * taps + jj];

  buf_.assign(static_cast<size_t>(taps) + block_samples, 0.0f);
  flag_buf_.assign(buf_.size(), 0);
  reset();
}

void Resampler::reset() {
  const int half = spec_.taps / 2;
  const int64_t first_needed = static_cast<int64_t>(std::floor(first_position_)) - half + 1;
  in_index_ = 0;
  next_out_ = 0;
  zeros_padded_ = 0;
  flushed_ = false;
  if (first_needed < 0) {
    buf_start_ = first_needed;
    size_ = static_cast<size_t>(-first_needed);
    std::fill(buf_.begin(), buf_.begin() + static_cast<ptrdiff_t>(size_), 0.0f);
    std::fill(flag_buf_.begin(), flag_buf_.begin() + static_cast<ptrdiff_t>(size_), 0);
  } else {
    buf_start_ = 0;
    size_ = 0;
  }
}

std::string Resampler::describe() const {
  std::ostringstream s;
  s << "resampler: ratio " << spec_.ratio << " input/output, Kaiser-windowed sinc " << spec_.taps
    << " taps x " << spec_.phases << " phases (linear between phases), beta " << spec_.kaiser_beta
    << ", passband " << spec_.passband_edge << " stopband " << spec_.stopband_edge
    << " cycles/input sample, output 0 at input " << first_position_ << ", flag reach " << flag_reach_;
  return s.str();
}

void Resampler::compact(int64_t first_needed) {
  if (first_needed <= buf_start_ || size_ == 0) return;
  const size_t drop = static_cast<size_t>(std::min<int64_t>(static_cast<int64_t>(size_), first_needed - buf_start_));
  std::memmove(buf_.data(), buf_.data() + drop, (size_ - drop) * sizeof(float));
  std::memmove(flag_buf_.data(), flag_buf_.data() + drop, size_ - drop);
  size_ -= drop;
  buf_start_ += static_cast<int64_t>(drop);
}

template <bool with_flags>
Progress Resampler::run(std::span<const float> in, std::span<const uint8_t> in_flags,
                        std::span<float> out, std::span<uint8_t> out_flags, bool flushing) {
  const int taps = spec_.taps;
  const int half = taps / 2;
  const int phases = spec_.phases;
  size_t consumed = 0, produced = 0;
  for (;;) {
    while (produced < out.size()) {
      const double t = input_position(next_out_);
      if (flushing && t >= static_cast<double>(in_index_)) {
        flushed_ = true;
        return {consumed, produced};
      }
      const int64_t i0 = static_cast<int64_t>(std::floor(t));
      const int64_t last = i0 + half;
      if (last >= buf_start_ + static_cast<int64_t>(size_)) {
        if (!flushing) break;
        compact(i0 - half + 1);
        const int64_t need = last + 1 - (buf_start_ + static_cast<int64_t>(size_));
        std::fill(buf_.begin() + static_cast<ptrdiff_t>(size_), buf_.begin() + static_cast<ptrdiff_t>(size_ + need), 0.0f);
        std::fill(flag_buf_.begin() + static_cast<ptrdiff_t>(size_), flag_buf_.begin() + static_cast<ptrdiff_t>(size_ + need), 0);
        size_ += static_cast<size_t>(need);
        zeros_padded_ += need;
      }
      const double scaled = (t - static_cast<double>(i0)) * phases;
      int p = static_cast<int>(scaled);
      if (p >= phases) p = phases - 1;
      const float a = static_cast<float>(scaled - p);
      const size_t base = static_cast<size_t>(i0 - half + 1 - buf_start_);
      const float* x = buf_.data() + base;
      const float* c = table_.data() + static_cast<size_t>(p) * taps;
      const float* d = delta_.data() + static_cast<size_t>(p) * taps;
      float s0 = 0.0f, s1 = 0.0f;
      for (int j = 0; j < taps; ++j) {
        s0 += x[j] * c[j];
        s1 += x[j] * d[j];
      }
      out[produced] = s0 + a * s1;
      if constexpr (with_flags) {
        const int64_t k_lo = static_cast<int64_t>(std::ceil(t - flag_reach_));
        const int64_t k_hi = static_cast<int64_t>(std::floor(t + flag_reach_));
        uint8_t f = 0;
        for (int64_t k = k_lo; k <= k_hi; ++k) f |= flag_buf_[static_cast<size_t>(k - buf_start_)];
        out_flags[produced] = f;
      }
      ++produced;
      ++next_out_;
    }
    if (produced == out.size() || consumed == in.size() || flushing) break;
    const int64_t first_needed = static_cast<int64_t>(std::floor(input_position(next_out_))) - half + 1;
    compact(first_needed);
    while (consumed < in.size() && size_ < buf_.size()) {
      const size_t remaining = in.size() - consumed;
      if (size_ == 0 && static_cast<int64_t>(in_index_) < first_needed) {
        // Input entirely before the first output's reach: consumed, never needed.
        const size_t skip = static_cast<size_t>(std::min<int64_t>(static_cast<int64_t>(remaining),
                                                                 first_needed - static_cast<int64_t>(in_index_)));
        consumed += skip;
        in_index_ += skip;
        buf_start_ = static_cast<int64_t>(in_index_);
        continue;
      }
      const size_t n = std::min(remaining, buf_.size() - size_);
      for (size_t k = 0; k < n; ++k)
        if (!std::isfinite(in[consumed + k]))
          throw_input("resampler", "input sample " + std::to_string(in_index_ + k) + " is not finite (" +
                                       std::to_string(in[consumed + k]) + ")");
      std::memcpy(buf_.data() + size_, in.data() + consumed, n * sizeof(float));
      if constexpr (with_flags) std::memcpy(flag_buf_.data() + size_, in_flags.data() + consumed, n);
      size_ += n;
      consumed += n;
      in_index_ += n;
    }
  }
  return {consumed, produced};
}

Progress Resampler::process(std::span<const float> in, std::span<float> out) {
  if (flushed_ && !in.empty()) throw_usage("resampler", "process() after flush(): call reset() first");
  return run<false>(in, {}, out, {}, false);
}

Progress Resampler::process(std::span<const float> in, std::span<const uint8_t> in_flags,
                            std::span<float> out, std::span<uint8_t> out_flags) {
  if (in_flags.size() != in.size() || out_flags.size() != out.size())
    throw_usage("resampler", "flag spans must have the sizes of the sample spans (in " +
                                 std::to_string(in.size()) + "/" + std::to_string(in_flags.size()) + ", out " +
                                 std::to_string(out.size()) + "/" + std::to_string(out_flags.size()) + ")");
  if (flushed_ && !in.empty()) throw_usage("resampler", "process() after flush(): call reset() first");
  return run<true>(in, in_flags, out, out_flags, false);
}

Progress Resampler::flush(std::span<float> out) { return run<false>({}, {}, out, {}, true); }

Progress Resampler::flush(std::span<float> out, std::span<uint8_t> out_flags) {
  if (out_flags.size() != out.size())
    throw_usage("resampler", "flag span must have the size of the sample span");
  return run<true>({}, {}, out, out_flags, true);
}

double Resampler::response(double f, double mu) const {
  const int taps = spec_.taps;
  const double scaled = std::clamp(mu, 0.0, 1.0) * spec_.phases;
  int p = std::min(static_cast<int>(scaled), spec_.phases - 1);
  const double a = scaled - p;
  std::complex<double> acc = 0.0;
  for (int jj = 0; jj < taps; ++jj) {
    const double c = table_[static_cast<size_t>(p) * taps + jj] + a * delta_[static_cast<size_t>(p) * taps + jj];
    acc += c * std::polar(1.0, 2.0 * pi * f * (jj - taps / 2 + 1));
  }
  return std::abs(acc);
}

FlagSpan map_span_to_output(const FlagSpan& span, double first_output_position, double ratio,
                            double reach) {
  if (!(ratio > 0.0)) throw_usage("map_span_to_output.ratio", "must be > 0");
  FlagSpan r{0, 0, span.kind};
  if (span.end <= span.start) return r;
  const double lo = (static_cast<double>(span.start) - reach - first_output_position) / ratio;
  const double hi = (static_cast<double>(span.end - 1) + reach - first_output_position) / ratio;
  const double n_lo = std::max(0.0, std::ceil(lo));
  const double n_hi = std::floor(hi);
  r.start = static_cast<uint64_t>(n_lo);
  r.end = n_hi < n_lo ? r.start : static_cast<uint64_t>(n_hi) + 1;
  return r;
}

}  // namespace salvor
