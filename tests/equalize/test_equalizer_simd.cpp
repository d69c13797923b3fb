// The equalizer's SIMD kernels (equalizer_kernels.cpp) against its scalar reference loops
// (EqualizerConfig::reference_kernel = true), on every SIMD target Highway compiled and this
// CPU supports. Filtering sums in the reference's order, so it must be bit-exact. Training
// computes each output with a different summation order (lane sums; the output two updates
// ahead), so outputs and taps agree to rounding only. Tolerances (common practice, no
// source): taps within 1e-9 and double-precision error statistics within 1e-9 relative
// (rounding differences of ~1e-16 per operation, and LMS does not amplify them); float
// outputs within 1e-5 absolute, a few float ulps at the output scale (|y| < 8).

#include <gtest/gtest.h>

#include <hwy/targets.h>

#include <algorithm>
#include <cmath>
#include <limits>
#include <random>
#include <string>
#include <vector>

#include "simd_targets.hpp"
#include "equalize/equalizer.hpp"
#include "equalize/targets.hpp"
#include "lorentzian_channel.hpp"

using namespace salvor::equalize;
using salvor::testing::convolve_levels;
using salvor::testing::lorentzian_bit_response;
using salvor::testing::random_levels;

using salvor::testing::for_each_simd_target;

namespace {


struct EqRun {
  std::vector<float> out;
  std::vector<double> taps;
  ErrorStats stats;
  double running_mse = 0.0;
};

// Random input with non-finite samples and erasure flags sprinkled in.
std::vector<float> noisy_input(size_t n, uint32_t seed, std::vector<uint8_t>& erasure) {
  std::mt19937 rng(seed);
  std::normal_distribution<float> g(0.0f, 1.0f);
  std::vector<float> x(n);
  erasure.assign(n, 0);
  for (size_t i = 0; i < n; ++i) {
    x[i] = g(rng);
    const uint32_t r = rng() % 1000;
    if (r == 0) x[i] = std::numeric_limits<float>::quiet_NaN();
    if (r == 1) x[i] = std::numeric_limits<float>::infinity();
    if (r >= 2 && r < 6) erasure[i] = 1;
  }
  return x;
}

EqualizerConfig random_taps_config(size_t taps, size_t delay, uint32_t seed) {
  std::mt19937 rng(seed);
  std::uniform_real_distribution<double> u(-1.0, 1.0);
  EqualizerConfig c;
  c.taps = taps;
  c.delay = delay;
  c.initial_taps.resize(taps);
  for (double& w : c.initial_taps) w = u(rng);
  return c;
}

// Filter only, in chunks of the given sizes (cycled), then flush.
std::vector<float> filter(EqualizerConfig c, bool reference, const std::vector<float>& x,
                          const std::vector<uint8_t>& erasure, const std::vector<size_t>& chunks) {
  c.reference_kernel = reference;
  Equalizer eq(c);
  std::vector<float> y(x.size() + c.delay);
  size_t at = 0, produced = 0, k = 0;
  while (at < x.size()) {
    const size_t n = std::min(chunks[k++ % chunks.size()], x.size() - at);
    const auto p = eq.process(std::span(x).subspan(at, n), std::span(y).subspan(produced),
                              std::span(erasure).subspan(at, n));
    at += p.consumed;
    produced += p.produced;
  }
  produced += eq.flush(std::span(y).subspan(produced));
  y.resize(produced);
  return y;
}

// Training on levels (0 = unknown, no update), in chunks, `epochs` times over the same span.
EqRun train(EqualizerConfig c, bool reference, const std::vector<float>& x, const std::vector<int8_t>& levels,
          const std::vector<uint8_t>& erasure, const std::vector<size_t>& chunks, int epochs = 1) {
  c.reference_kernel = reference;
  Equalizer eq(c);
  EqRun r;
  for (int ep = 0; ep < epochs; ++ep) {
    eq.restart_span();
    r.out.assign(x.size() + c.delay, 0.0f);
    size_t at = 0, produced = 0, k = 0;
    while (at < x.size()) {
      const size_t n = std::min(chunks[k++ % chunks.size()], x.size() - at);
      const auto p = eq.train(std::span(x).subspan(at, n), std::span(levels).subspan(at, n),
                              std::span(r.out).subspan(produced), std::span(erasure).subspan(at, n));
      at += p.consumed;
      produced += p.produced;
    }
    produced += eq.flush(std::span(r.out).subspan(produced));
    r.out.resize(produced);
  }
  r.taps = eq.taps();
  r.stats = eq.total_stats();
  r.running_mse = eq.running_mse();
  return r;
}

void expect_close(const EqRun& simd, const EqRun& ref) {
  ASSERT_EQ(simd.out.size(), ref.out.size());
  double worst = 0.0;
  for (size_t i = 0; i < ref.out.size(); ++i) worst = std::max(worst, std::fabs(double(simd.out[i]) - ref.out[i]));
  EXPECT_LE(worst, 1e-5) << "largest output difference";
  ASSERT_EQ(simd.taps.size(), ref.taps.size());
  for (size_t i = 0; i < ref.taps.size(); ++i) EXPECT_NEAR(simd.taps[i], ref.taps[i], 1e-9) << "tap " << i;
  EXPECT_EQ(simd.stats.count, ref.stats.count);
  EXPECT_NEAR(simd.stats.mse, ref.stats.mse, 1e-9 * ref.stats.mse);
  EXPECT_NEAR(simd.running_mse, ref.running_mse, 1e-9 * ref.running_mse);
}

}  // namespace

TEST(EqualizerSimd, FilterEqualsReferenceBitForBitOnRandomInput) {
  std::vector<uint8_t> erasure;
  const auto x = noisy_input(5000, 3, erasure);
  struct Shape {
    size_t taps, delay, latency;
  };
  for (const Shape& sh : {Shape{15, 7, 256}, Shape{5, 0, 0}, Shape{31, 30, 16}, Shape{9, 4, 3}}) {
    EqualizerConfig c = random_taps_config(sh.taps, sh.delay, 5);
    c.max_decision_latency = sh.latency;
    const auto ref = filter(c, true, x, erasure, {x.size()});
    ASSERT_EQ(ref.size(), x.size());
    for_each_simd_target([&] {
      for (const std::vector<size_t>& chunks : {std::vector<size_t>{x.size()}, {1}, {7, 100, 3}, {1000}}) {
        EXPECT_EQ(filter(c, false, x, erasure, chunks), ref) << sh.taps << " taps, chunks of " << chunks[0];
      }
    });
  }
}

TEST(EqualizerSimd, TrainingMatchesReferenceOnRandomInput) {
  std::vector<uint8_t> erasure;
  const size_t n = 20000;
  const auto x = noisy_input(n, 8, erasure);
  // Levels: random +-1 with unknown stretches (0) that stop adaptation.
  std::mt19937 rng(9);
  std::vector<int8_t> levels(n);
  for (size_t i = 0; i < n; ++i) levels[i] = (i % 3000) < 200 ? 0 : ((rng() & 1) ? 1 : -1);
  for (bool normalized : {true, false}) {
    for (bool fix_main : {false, true}) {
      EqualizerConfig c;
      c.normalized = normalized;
      c.step_size = normalized ? 0.02 : 0.002;
      c.fix_main_tap = fix_main;
      c.target = {1.0, 2.0, 0.0, -2.0, -1.0};  // E2PR4-like, 5 taps
      const EqRun ref = train(c, true, x, levels, erasure, {n});
      ASSERT_GT(ref.stats.count, 10000u);
      for_each_simd_target([&] {
        SCOPED_TRACE(std::string(normalized ? "NLMS" : "LMS") + (fix_main ? ", main tap fixed" : ""));
        expect_close(train(c, false, x, levels, erasure, {n}), ref);
        expect_close(train(c, false, x, levels, erasure, {5, 64, 1, 333}), ref);
      });
    }
  }
}

TEST(EqualizerSimd, MatchesReferenceOnSyntheticReadback) {
  // Lorentzian readback at density 2.5 with noise, NLMS towards EPR4 from a unit main tap,
  // three training epochs over a sector-sized span (as the sector decoder trains), then the
  // trained filter on fresh readback (bit-exact given equal taps: reference taps copied in).
  const auto h = lorentzian_bit_response(2.5, 12);
  const auto a = random_levels(6000, 31);
  const auto x = convolve_levels(h, a, 0.05, 32);
  std::vector<uint8_t> erasure(x.size(), 0);
  std::fill(erasure.begin() + 4000, erasure.begin() + 4040, 1);  // a dropout
  // Equalizer position j holds level j - 12 (the response origin is at index 12).
  std::vector<int8_t> levels(x.size(), 0);
  for (size_t j = 12; j < x.size(); ++j) levels[j] = a[j - 12];
  EqualizerConfig c;
  c.target = lookup_target("EPR4").taps;
  c.target_name = "EPR4";
  c.step_size = 0.01;
  const EqRun ref = train(c, true, x, levels, erasure, {x.size()}, 3);
  ASSERT_GT(ref.stats.count, 15000u);
  const auto fresh = convolve_levels(h, random_levels(3000, 33), 0.05, 34);
  std::vector<uint8_t> none(fresh.size(), 0);
  EqualizerConfig trained = c;
  trained.initial_taps = ref.taps;
  const auto filtered_ref = filter(trained, true, fresh, none, {fresh.size()});
  for_each_simd_target([&] {
    expect_close(train(c, false, x, levels, erasure, {x.size()}, 3), ref);
    expect_close(train(c, false, x, levels, erasure, {4096, 17}, 3), ref);
    EXPECT_EQ(filter(trained, false, fresh, none, {512}), filtered_ref);
  });
}

TEST(EqualizerSimd, DecisionDirectedMatchesReference) {
  // Filter, then hand the written levels back at a fixed lag of 40 outputs (decision-directed),
  // on Lorentzian readback whose gain drops by 20 % halfway.
  const auto h = lorentzian_bit_response(2.0, 10);
  const auto a = random_levels(8000, 41);
  auto x = convolve_levels(h, a, 0.03, 42);
  for (size_t i = x.size() / 2; i < x.size(); ++i) x[i] *= 0.8f;
  std::vector<int8_t> levels(x.size(), 0);
  for (size_t j = 10; j < x.size(); ++j) levels[j] = a[j - 10];
  auto run = [&](bool reference) {
    EqualizerConfig c;
    c.target = {1.0, 0.0, -1.0};
    c.step_size = 0.01;
    c.reference_kernel = reference;
    Equalizer eq(c);
    EqRun r;
    r.out.resize(x.size());
    size_t produced = 0, decided = 0;
    for (size_t at = 0; at < x.size(); at += 100) {
      const auto p = eq.process(std::span(x).subspan(at, 100), std::span(r.out).subspan(produced));
      produced += p.produced;
      if (produced > decided + 40) {
        eq.adapt_decided(decided, std::span(levels).subspan(decided, produced - 40 - decided));
        decided = produced - 40;
      }
    }
    r.out.resize(produced);
    r.taps = eq.taps();
    r.stats = eq.total_stats();
    r.running_mse = eq.running_mse();
    return r;
  };
  const EqRun ref = run(true);
  ASSERT_GT(ref.stats.count, 7000u);
  for_each_simd_target([&] { expect_close(run(false), ref); });
}
