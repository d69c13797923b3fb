#include "analysis/channel_fit.hpp"

#include <cmath>
#include <functional>

#include "timing/farrow.hpp"

namespace salvor::analysis {

namespace {
constexpr double kPi = 3.14159265358979323846;

// Minimises f on [lo, hi] (unimodal assumed) by golden-section search.
double golden_min(const std::function<double(double)>& f, double lo, double hi, int iterations) {
  const double g = (std::sqrt(5.0) - 1) / 2;
  double a = lo, b = hi;
  double c = b - g * (b - a), d = a + g * (b - a);
  double fc = f(c), fd = f(d);
  for (int i = 0; i < iterations; ++i) {
    if (fc < fd) {
      b = d;
      d = c;
      fd = fc;
      c = b - g * (b - a);
      fc = f(c);
    } else {
      a = c;
      c = d;
      fc = fd;
      d = a + g * (b - a);
      fd = f(d);
    }
  }
  return (a + b) / 2;
}

// Time of sample i of a window: mid-bit samples at first_bit + i/2 - 1/2, bit samples at
// first_bit + (i-1)/2.
double sample_time(const FitWindow& w, size_t i) { return w.first_bit + double(i / 2) - (i % 2 == 0 ? 0.5 : 0.0); }

struct Fit {
  double sse = 0;
  std::vector<double> amp;
};

// The readback at bit time x as the timing loop produces it: cubic Lagrange interpolation
// from an input grid of spb samples per bit, averaged over the grid's phase.
double seen_readback(const std::vector<int>& tr, int first_bit, double pw50, double x, double spb) {
  if (spb <= 0) return lorentzian_readback(tr, first_bit, pw50, x);
  constexpr int kPhases = 8;
  double acc = 0;
  for (int p = 0; p < kPhases; ++p) {
    const double mu = (p + 0.5) / kPhases;
    const auto w = timing::cubic_lagrange_weights(mu);
    for (int i = -1; i <= 2; ++i) acc += w[size_t(i + 1)] * lorentzian_readback(tr, first_bit, pw50, x + (i - mu) / spb);
  }
  return acc / kPhases;
}

Fit evaluate(const std::vector<FitWindow>& ws, const std::vector<int>& tr, int first_bit, double pw50, double delta,
             double spb) {
  Fit f;
  // The model depends only on the time grid, identical for windows of the same shape.
  std::vector<double> model;
  const FitWindow* shape = nullptr;
  for (const auto& w : ws) {
    if (!shape || w.first_bit != shape->first_bit || w.samples.size() != shape->samples.size()) {
      shape = &w;
      model.resize(w.samples.size());
      for (size_t i = 0; i < w.samples.size(); ++i)
        model[i] = seen_readback(tr, first_bit, pw50, sample_time(w, i) - delta, spb);
    }
    double sxy = 0, sxx = 0, syy = 0;
    for (size_t i = 0; i < w.samples.size(); ++i) {
      sxy += model[i] * w.samples[i];
      sxx += model[i] * model[i];
      syy += double(w.samples[i]) * w.samples[i];
    }
    const double a = sxx > 0 ? sxy / sxx : 0;
    f.amp.push_back(a);
    f.sse += syy - a * sxy;
  }
  return f;
}
}  // namespace

ChannelFitResult fit_channel(const std::vector<FitWindow>& ws, const std::vector<int>& tr, int first_bit,
                             double spb) {
  ChannelFitResult r;
  if (ws.empty()) return r;
  double pw50 = 2.0, delta = 0.0;
  for (int round = 0; round < 2; ++round) {
    pw50 = golden_min([&](double d) { return evaluate(ws, tr, first_bit, d, delta, spb).sse; }, 0.6, 5.0, 40);
    delta = golden_min([&](double t) { return evaluate(ws, tr, first_bit, pw50, t, spb).sse; }, -0.3, 0.3, 30);
  }
  const Fit best = evaluate(ws, tr, first_bit, pw50, delta, spb);

  // Low-pass at 1/(2T): at two samples per bit that is 0.25 cycles per sample.
  const int taps = 31, half = 15;
  std::vector<double> lp(taps);
  double dc = 0;
  for (int n = 0; n < taps; ++n) {
    const double m = n - half;
    const double sinc = m == 0 ? 0.5 : std::sin(kPi * 0.5 * m) / (kPi * m);
    const double hamming = 0.54 - 0.46 * std::cos(2 * kPi * n / (taps - 1));
    lp[size_t(n)] = sinc * hamming;
    dc += lp[size_t(n)];
  }
  for (auto& v : lp) v /= dc;

  double noise2 = 0, amp2 = 0;
  size_t n_noise = 0;
  std::vector<double> model;
  const FitWindow* shape = nullptr;
  for (size_t wi = 0; wi < ws.size(); ++wi) {
    const auto& w = ws[wi];
    if (!shape || w.first_bit != shape->first_bit || w.samples.size() != shape->samples.size()) {
      shape = &w;
      model.resize(w.samples.size());
      for (size_t i = 0; i < w.samples.size(); ++i)
        model[i] = seen_readback(tr, first_bit, pw50, sample_time(w, i) - delta, spb);
    }
    std::vector<double> res(w.samples.size());
    for (size_t i = 0; i < w.samples.size(); ++i) res[i] = w.samples[i] - best.amp[wi] * model[i];
    for (size_t i = size_t(half); i + size_t(half) < res.size(); ++i) {
      double acc = 0;
      for (int k = 0; k < taps; ++k) acc += lp[size_t(k)] * res[i + size_t(k) - size_t(half)];
      noise2 += acc * acc;
      ++n_noise;
    }
    amp2 += best.amp[wi] * best.amp[wi];
  }
  r.valid = n_noise > 0;
  r.windows = ws.size();
  r.pw50_bits = pw50;
  r.timing_offset_bits = delta;
  r.amplitude = std::sqrt(amp2 / double(ws.size()));
  r.noise_rms = n_noise ? std::sqrt(noise2 / double(n_noise)) : 0;
  r.snr_db = r.noise_rms > 0 ? 20 * std::log10(r.amplitude / r.noise_rms) : 0;
  return r;
}

}  // namespace salvor::analysis
