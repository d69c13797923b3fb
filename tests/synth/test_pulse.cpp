// Pulse models against their definitions and closed forms.
#include <gtest/gtest.h>

#include <cmath>
#include <numbers>

#include "synth/pulse.hpp"
#include "synth_test_util.hpp"

using namespace salvor::synth;
using namespace salvor::synth::testing;

// Definition of PW50: the full width at half the peak (Bergmans 1996, ch. 3).
TEST(SynthPulse, LorentzianIsHalfItsPeakAtHalfPw50) {
  for (double pw50 : {0.7, 2.0, 2.5, 3.3}) {
    EXPECT_DOUBLE_EQ(lorentzian(0.0, pw50), 1.0);
    EXPECT_NEAR(lorentzian(pw50 / 2, pw50), 0.5, 1e-15);
    EXPECT_NEAR(lorentzian(-pw50 / 2, pw50), 0.5, 1e-15);
  }
}

// The rendered isolated transition has the same FWHM, measured from the samples.
TEST(SynthPulse, RenderedIsolatedTransitionHasFwhmPw50) {
  const double density = 2.3;
  auto cfg = plain_config(density, 16.0);
  cfg.span_widths = 40;
  const auto bits = bits_with_ones(400, {100, 300});
  const WrittenTrack w = write_track(bits, {}, 1);
  Renderer r(cfg, w, nullptr);
  const auto y = render_all(r);
  // Peak at bit 100 = sample 1600; crossings of 0.5 by linear interpolation.
  const size_t pk = 1600;
  ASSERT_NEAR(y[pk], 1.0, 3e-3);  // the other transition's tail: 1/(1+(400/2.3)^2) plus the far copies
  auto crossing = [&](int dir) {
    size_t i = pk;
    while (y[i] > 0.5 * y[pk]) i = dir > 0 ? i + 1 : i - 1;
    const size_t j = dir > 0 ? i - 1 : i + 1;  // inside
    const double f = (y[j] - 0.5 * y[pk]) / (y[j] - y[i]);
    return (static_cast<double>(j) + f * (static_cast<double>(i) - static_cast<double>(j))) / 16.0;
  };
  const double width = crossing(+1) - crossing(-1);
  EXPECT_NEAR(width, density, 2e-3);  // linear interpolation on a 1/16-bit grid
}

// Dibit energy, closed form E_p/T = (pi/2) D/(1+D^2) (read-channel-theory.md sec. 1,
// computed closed form; table values 0.78540, 0.62832, 0.54165, 0.47124).
TEST(SynthPulse, DibitEnergyMatchesClosedForm) {
  const double table[][2] = {{1.0, 0.78540}, {2.0, 0.62832}, {2.5, 0.54165}, {3.0, 0.47124}};
  for (const auto& row : table) {
    const double d = row[0];
    // Simpson's rule over +-4000 bit periods, step 1/64 T; the dibit falls off as 1/t^3.
    const double a = -4000, b = 4000, h = 1.0 / 64;
    const long n = static_cast<long>((b - a) / h);
    double sum = 0;
    for (long i = 0; i <= n; ++i) {
      const double t = a + i * h;
      const double p = lorentzian(t, d) - lorentzian(t - 1.0, d);
      const double wgt = (i == 0 || i == n) ? 1 : (i % 2 ? 4 : 2);
      sum += wgt * p * p;
    }
    const double energy = sum * h / 3;
    EXPECT_NEAR(energy, std::numbers::pi / 2 * d / (1 + d * d), 1e-9) << "D = " << d;
    EXPECT_NEAR(energy, row[1], 5e-6) << "D = " << d;
  }
}

// T-sampled dibit at D = 2: 0.1, 0.3, 0.5, -0.5, -0.3, -0.1 for k = -2..3 (h(kT) = 1/(1+k^2);
// read-channel-theory.md sec. 1, computed). Rendered through the full renderer.
TEST(SynthPulse, RenderedDibitSamplesAtD2) {
  auto cfg = plain_config(2.0, 1.0);
  cfg.span_widths = 100;  // dropped dibit tail < 1e-6
  const auto bits = bits_with_ones(2000, {1000, 1001});
  const WrittenTrack w = write_track(bits, {}, 1);
  Renderer r(cfg, w, nullptr);
  const auto y = render_all(r);
  const double expect[] = {0.1, 0.3, 0.5, -0.5, -0.3, -0.1};
  for (int k = -2; k <= 3; ++k) EXPECT_NEAR(y[1000 + k], expect[k + 2], 2e-5) << "k = " << k;
}

// erf model: s(T50/2) = erf(sqrt(ln 2)) = 0.76097 with T50 = FWHM of ds/dt
// (read-channel-theory.md sec. 1, computed).
TEST(SynthPulse, ErfStepAtHalfT50) {
  for (double t50 : {1.0, 1.6, 2.5}) {
    EXPECT_NEAR(erf_step(t50 / 2, t50), 0.76097, 5e-6);
    EXPECT_NEAR(erf_step(-t50 / 2, t50), -0.76097, 5e-6);
    EXPECT_DOUBLE_EQ(erf_step(0, t50), 0.0);
  }
}

// The derivative pulse of the erf step has full width at half maximum T50 (the convention).
TEST(SynthPulse, ErfDerivativeFwhmIsT50) {
  const double t50 = 1.7, h = 1e-6;
  auto deriv = [&](double t) { return (erf_step(t + h, t50) - erf_step(t - h, t50)) / (2 * h); };
  const double peak = deriv(0);
  double lo = 0, hi = 5 * t50;  // bisection for deriv = peak/2 on t > 0
  for (int i = 0; i < 80; ++i) {
    const double mid = 0.5 * (lo + hi);
    (deriv(mid) > 0.5 * peak ? lo : hi) = mid;
  }
  EXPECT_NEAR(2 * lo, t50, 1e-6);
}

// A rendered perpendicular transition swings from -1 to +1 and passes 0.76097 at +T50/2.
TEST(SynthPulse, RenderedErfTransition) {
  auto cfg = plain_config(1.6, 10.0);
  cfg.model = PulseModel::erf;
  cfg.span_widths = 4;
  const auto bits = bits_with_ones(400, {100, 300});
  const WrittenTrack w = write_track(bits, {}, 1);
  Renderer r(cfg, w, nullptr);
  const auto y = render_all(r);
  EXPECT_NEAR(y[500], -1.0, 1e-9);   // bit 50: before the first transition
  EXPECT_NEAR(y[2000], 1.0, 1e-9);   // bit 200: between the two
  EXPECT_NEAR(y[3500], -1.0, 1e-9);  // bit 350: after the second
  EXPECT_NEAR(y[1000], 0.0, 1e-9);   // at the transition
  EXPECT_NEAR(y[1008], 0.76097, 5e-6);  // +0.8 T = T50/2
}

// Truncation: the tails dropped beyond +-span widths alternate in sign and shrink on each
// side, so the error is at most 2 / (1 + 4 span^2) (alternating-series bound). Checked on a
// random pattern against a render with a very wide span.
TEST(SynthPulse, LorentzianTruncationWithinStatedBound) {
  std::vector<uint8_t> bits(6000);
  RandomStream rng(99);
  for (auto& b : bits) b = rng.uniform() < 0.45;
  const double span = 6;
  auto cfg = plain_config(2.5, 2.5);
  cfg.span_widths = span;
  auto ref_cfg = cfg;
  ref_cfg.span_widths = 100;
  const WrittenTrack w = write_track(bits, {}, 1);
  Renderer a(cfg, w, nullptr), b(ref_cfg, w, nullptr);
  const auto ya = render_all(a), yb = render_all(b);
  double max_err = 0;
  for (size_t i = 0; i < ya.size(); ++i) max_err = std::max(max_err, std::abs(ya[i] - yb[i]));
  const double bound = 2 * lorentzian_truncation_peak_fraction(span);
  EXPECT_LT(max_err, bound + 2 * lorentzian_truncation_peak_fraction(100));
  EXPECT_GT(max_err, 0.01 * bound);  // the truncation is real, not skipped
  // Stated energy fraction: 1 - (2/pi)(atan(2S) + 2S/(1+4S^2)), checked numerically.
  double in = 0, all = 0;
  for (double t = -5000; t <= 5000; t += 1e-3) {
    const double v = lorentzian(t, 1.0);
    all += v * v;
    if (std::abs(t) <= span) in += v * v;
  }
  EXPECT_NEAR(1 - in / all, lorentzian_truncation_energy_fraction(span), 2e-5);
}
