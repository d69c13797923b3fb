// Renderer mechanics: chunking, reset, bad configurations, front-end and damage effects;
// the low-pass filter and the random streams.
#include <gtest/gtest.h>

#include <cmath>
#include <complex>
#include <numbers>
#include <random>

#include "common/error.hpp"
#include "synth/filters.hpp"
#include "synth/renderer.hpp"
#include "synth/rng.hpp"
#include "synth_test_util.hpp"

using namespace salvor::synth;
using namespace salvor::synth::testing;

namespace {

std::vector<uint8_t> random_bits(size_t n, uint64_t seed, double p = 0.45) {
  std::vector<uint8_t> b(n);
  RandomStream r(seed);
  for (auto& v : b) v = r.uniform() < p;
  return b;
}

// A configuration that exercises every stage at once.
RenderConfig busy_config() {
  RenderConfig c = plain_config(2.3, 2.5);
  c.lead_bits = 300;
  c.tail_bits = 200;
  c.sampling_phase = 0.37;
  c.spindle = {150e-6, 60e-6, 3000, 0.4};
  c.noise.snr_db = 20;
  c.front_end.mr_asymmetry = 0.05;
  c.front_end.dc_offset = 0.02;
  c.front_end.wander = WanderKind::random;
  c.front_end.wander_amplitude = 0.03;
  c.front_end.wander_corner_rel = 1e-3;
  c.front_end.lowpass_order = 4;
  c.front_end.lowpass_corner_rel = 0.6;
  c.digitizer = {SampleFormat::int16, 2.5};
  c.offtrack_fraction = 0.05;
  c.dropouts = {{1000, 400, 0.8, 50}};
  c.neighbour_dropouts = {{1100, 400, 0.8, 50}};
  c.asperities = {{2500, 1.0, 4, 100}};
  c.defects = {{3500, 100, 0.3}};
  return c;
}

}  // namespace

// Project convention (DEVELOPERS.md): chunks of 1, 7, 4096 and the whole give the same output.
TEST(SynthRenderer, ChunkingDoesNotChangeTheOutput) {
  const auto bits = random_bits(5000, 3), nb_bits = random_bits(5000, 4);
  const WrittenTrack w = write_track(bits, {0.05, 0.03}, 10);
  const WrittenTrack nb = write_track(nb_bits, {0.05, 0.03}, 11);
  for (PulseModel model : {PulseModel::lorentzian, PulseModel::erf}) {
    RenderConfig cfg = busy_config();
    cfg.model = model;
    if (model == PulseModel::erf) cfg.span_widths = 4;
    Renderer whole(cfg, w, &nb);
    std::vector<float> ref(whole.total_samples());
    ASSERT_EQ(whole.process(ref).produced, ref.size());
    EXPECT_EQ(whole.process(ref).produced, 0u);  // finished
    for (size_t chunk : {size_t{1}, size_t{7}, size_t{4096}}) {
      Renderer r(cfg, w, &nb);
      std::vector<float> got;
      std::vector<float> buf(chunk);
      for (;;) {
        const auto p = r.process(buf);
        if (!p.produced) break;
        got.insert(got.end(), buf.begin(), buf.begin() + static_cast<long>(p.produced));
      }
      ASSERT_EQ(got.size(), ref.size()) << chunk;
      EXPECT_EQ(got, ref) << "chunk " << chunk;
    }
    // reset() starts the same capture again; a copy mid-stream continues identically.
    whole.reset();
    std::vector<float> again(ref.size());
    whole.process(std::span<float>(again).first(1000));
    Renderer copy = whole;
    whole.process(std::span<float>(again).subspan(1000));
    EXPECT_EQ(again, ref);
    std::vector<float> tail(ref.size() - 1000);
    copy.process(tail);
    EXPECT_TRUE(std::equal(tail.begin(), tail.end(), ref.begin() + 1000));
  }
}

TEST(SynthRenderer, RefusesBadConfigurations) {
  const auto bits = random_bits(1000, 5);
  const WrittenTrack w = write_track(bits, {}, 1);
  auto expect_usage = [&](RenderConfig c, const char* what) {
    try {
      Renderer r(c, w, nullptr);
      ADD_FAILURE() << "accepted: " << what;
    } catch (const salvor::Error& e) {
      EXPECT_EQ(e.kind(), salvor::ErrorKind::usage) << what;
    }
  };
  RenderConfig c = plain_config(2.0, 2.5);
  auto d = c; d.density = 0.1; expect_usage(d, "density 0.1");
  d = c; d.samples_per_bit = 0.5; expect_usage(d, "0.5 samples per bit");
  d = c; d.front_end.lowpass_order = 4; d.front_end.lowpass_corner_rel = 1.3; expect_usage(d, "corner above Nyquist");
  d = c; d.offtrack_fraction = 0.1; expect_usage(d, "off-track without a neighbour");
  d = c; d.sampling_phase = 1.0; expect_usage(d, "phase 1");
  d = c; d.spindle.offset = 0.02; expect_usage(d, "20000 ppm");
  d = c; d.dropouts = {{10, 100, 0.5, 60}}; expect_usage(d, "edges longer than half the dropout");
  d = c; d.lead_bits = 1001; expect_usage(d, "lead longer than the track");
  EXPECT_THROW(write_track(std::vector<uint8_t>{0, 2, 1}, {}, 1), salvor::Error);
  EXPECT_THROW(write_track(std::vector<uint8_t>{}, {}, 1), salvor::Error);
}

// The track is a circle: the lead before the index reads the end of the same track, and the
// tail after the next index reads its start again (one written track, no speed change).
TEST(SynthRenderer, CaptureWrapsAroundTheIndex) {
  const auto bits = random_bits(3001, 31);  // odd length; a splice if the parity is odd
  const WrittenTrack w = write_track(bits, {}, 1);
  auto cfg = plain_config(2.2, 2.0);
  cfg.lead_bits = 300;
  cfg.tail_bits = 300;
  Renderer r(cfg, w, nullptr);
  const auto y = render_all(r);
  ASSERT_EQ(y.size(), static_cast<size_t>(2 * (3001 + 600) + 1));
  EXPECT_DOUBLE_EQ(r.index_sample(), 600.0);
  for (size_t i = 0; i < 1200; ++i) ASSERT_NEAR(y[i], y[i + 2 * 3001], 1e-12) << i;
}

// MR asymmetry is y = x + c x^2 on the head signal (Wang & Taratorin 1999, ch. 11).
TEST(SynthRenderer, MrAsymmetryIsQuadratic) {
  const auto bits = random_bits(3000, 6);
  const WrittenTrack w = write_track(bits, {}, 1);
  auto cfg = plain_config(2.0, 2.5);
  Renderer lin(cfg, w, nullptr);
  cfg.front_end.mr_asymmetry = 0.1;
  Renderer asym(cfg, w, nullptr);
  const auto x = render_all(lin), y = render_all(asym);
  for (size_t i = 0; i < x.size(); ++i) ASSERT_NEAR(y[i], x[i] + 0.1 * x[i] * x[i], 1e-12);
}

// Thermal asperity: linear rise over rise_bits, then A exp(-u / decay) (the model stated in
// renderer.hpp), on an otherwise silent track.
TEST(SynthRenderer, ThermalAsperityShape) {
  const std::vector<uint8_t> silent(4000, 0);
  const WrittenTrack w = write_track(silent, {}, 1);
  auto cfg = plain_config(2.0, 2.0);
  cfg.asperities = {{1000.0, 1.5, 4.0, 200.0}};
  Renderer r(cfg, w, nullptr);
  const auto y = render_all(r);
  // The same asperity one revolution earlier (at bit -3000) still adds 1.5 exp(-20) ~ 3e-9.
  EXPECT_NEAR(y[1998], 0.0, 1e-8);                // bit 999
  EXPECT_NEAR(y[2004], 1.5 * 2.0 / 4.0, 1e-8);    // bit 1002: half way up
  EXPECT_NEAR(y[2008], 1.5, 1e-8);                // bit 1004: top
  EXPECT_NEAR(y[2008 + 400], 1.5 * std::exp(-1.0), 1e-8);  //one decay constant later
}

// A scratch lowers the amplitude by `depth` in its middle; a defect leaves noise of the
// given rms and nothing of the written signal.
TEST(SynthRenderer, ScratchAndDefectSpans) {
  const auto bits = random_bits(20000, 8);
  const WrittenTrack w = write_track(bits, {}, 1);
  auto cfg = plain_config(2.0, 2.0);
  Renderer clean(cfg, w, nullptr);
  cfg.dropouts = {{4000, 3000, 0.75, 200}};
  cfg.defects = {{12000, 4000, 0.25}};
  Renderer dmg(cfg, w, nullptr);
  const auto x = render_all(clean), y = render_all(dmg);
  // Middle of the scratch (bits 4300..6700): exactly 0.25 of the clean signal.
  for (size_t i = 2 * 4300; i < 2 * 6700; ++i) ASSERT_NEAR(y[i], 0.25 * x[i], 1e-12);
  // Outside both: unchanged.
  for (size_t i = 2 * 8000; i < 2 * 11000; ++i) ASSERT_DOUBLE_EQ(y[i], x[i]);
  // Defect: rms 0.25, independent of the written signal.
  double s2 = 0, sxy = 0;
  const size_t a = 2 * 12000 + 2, b = 2 * 16000 - 2;
  for (size_t i = a; i < b; ++i) {
    s2 += y[i] * y[i];
    sxy += y[i] * x[i];
  }
  const double n = static_cast<double>(b - a);
  EXPECT_NEAR(std::sqrt(s2 / n), 0.25, 0.25 * 0.05);  // 8000 samples: 5 % is > 6 sigma
  EXPECT_LT(std::abs(sxy / n), 0.02);
}

// The neighbour's readback is added with the configured fraction (off-track interference).
TEST(SynthRenderer, OfftrackAddsTheNeighbourFraction) {
  const auto bits = random_bits(3000, 12), nb_bits = random_bits(3000, 13);
  const WrittenTrack w = write_track(bits, {}, 1), nb = write_track(nb_bits, {}, 2);
  auto cfg = plain_config(2.0, 2.5);
  Renderer main_only(cfg, w, nullptr), nb_only(cfg, nb, nullptr);
  cfg.offtrack_fraction = 0.07;
  Renderer both(cfg, w, &nb);
  const auto x = render_all(main_only), n = render_all(nb_only), y = render_all(both);
  for (size_t i = 0; i < y.size(); ++i) ASSERT_NEAR(y[i], x[i] + 0.07 * n[i], 1e-12);
}

// An odd number of transitions leaves the written level at +1 at the end of the track: a
// splice transition back to -1 sits half a bit before the index.
TEST(SynthRenderer, WriteSpliceKeepsPolaritiesAlternating) {
  const auto bits = bits_with_ones(100, {10, 20, 30});
  const WrittenTrack w = write_track(bits, {}, 1);
  ASSERT_TRUE(w.has_splice);
  ASSERT_EQ(w.position.size(), 4u);
  EXPECT_DOUBLE_EQ(w.position.back(), 99.5);
  for (size_t k = 1; k < w.polarity.size(); ++k) EXPECT_EQ(w.polarity[k], -w.polarity[k - 1]);
  EXPECT_EQ(w.polarity.front(), 1);  // from level -1 before bit 0
}

// Bilinear Butterworth: |H(f)|^2 = 1 / (1 + (tan(pi f/fs)/tan(pi fc/fs))^(2N))
// (Oppenheim & Schafer, Discrete-Time Signal Processing, 3rd ed., sec. 7.1-7.2).
TEST(SynthFilters, ButterworthMagnitudeMatchesClosedForm) {
  for (int order : {1, 2, 3, 4, 6}) {
    ButterworthLowpass f({order, 0.6, 2.5});
    for (double fr : {0.01, 0.2, 0.5, 0.6, 0.9, 1.2}) {
      const double r = std::tan(std::numbers::pi * fr / 2.5) / std::tan(std::numbers::pi * 0.6 / 2.5);
      const double expect = 1.0 / std::sqrt(1.0 + std::pow(r, 2 * order));
      EXPECT_NEAR(f.magnitude_at(fr), expect, 1e-12) << "order " << order << " f " << fr;
    }
    // The filter that runs (process) is the one designed: DFT of its impulse response.
    std::vector<double> imp(4096, 0.0);
    imp[0] = 1;
    f.process(imp);
    for (double fr : {0.1, 0.6, 1.0}) {
      std::complex<double> h = 0;
      for (size_t n = 0; n < imp.size(); ++n) h += imp[n] * std::polar(1.0, -2 * std::numbers::pi * fr / 2.5 * n);
      EXPECT_NEAR(std::abs(h), f.magnitude_at(fr), 1e-9);
    }
  }
  // DC group delay: a ramp comes out delayed by exactly sum k h[k] / sum h[k] in steady state
  // (unit DC gain), which is what the sidecar reports as lowpass_group_delay_bits.
  for (int order : {2, 4, 5}) {
    ButterworthLowpass f({order, 0.6, 2.5});
    std::vector<double> ramp(6000);
    for (size_t n = 0; n < ramp.size(); ++n) ramp[n] = static_cast<double>(n);
    f.process(ramp);
    EXPECT_NEAR(5999.0 - ramp.back(), f.group_delay_samples(0.0), 1e-5) << "order " << order;
    EXPECT_GT(f.group_delay_samples(0.0), 0.5);
  }
  EXPECT_THROW(ButterworthLowpass({4, 1.3, 2.5}), salvor::Error);
  EXPECT_THROW(ButterworthLowpass({0, 0.3, 2.5}), salvor::Error);
}

// std::mt19937_64's 10000th output is 9981545732273789042 (ISO C++ [rand.predef]); the
// Box–Muller deviates have mean 0 and variance 1.
TEST(SynthRng, EngineAndGaussianMoments) {
  std::mt19937_64 e;  // default seed 5489
  for (int i = 0; i < 9999; ++i) e();
  EXPECT_EQ(e(), 9981545732273789042ull);
  RandomStream r(derive_seed(1, {2, 3}));
  const int n = 400000;
  double s = 0, s2 = 0, s4 = 0;
  for (int i = 0; i < n; ++i) {
    const double g = r.gaussian();
    s += g;
    s2 += g * g;
    s4 += g * g * g * g;
  }
  EXPECT_NEAR(s / n, 0.0, 5 * std::sqrt(1.0 / n));
  EXPECT_NEAR(s2 / n, 1.0, 5 * std::sqrt(2.0 / n));
  EXPECT_NEAR(s4 / n, 3.0, 5 * std::sqrt(96.0 / n));  // Gaussian fourth moment 3, var(g^4) = 96
  EXPECT_NE(derive_seed(1, {2, 3}), derive_seed(1, {3, 2}));
  EXPECT_NE(derive_seed(1, {2, 3}), derive_seed(2, {2, 3}));
}
