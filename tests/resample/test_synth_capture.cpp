// The bit-rate estimate and the conditioning chain on captures rendered by the simulator
// (tools/synth, salvor_synth_core): NRZI channel bits with 2T preambles ("10" repeated),
// media jitter, electronic noise, a front-end low-pass and an int16 digitizer.
#include <gtest/gtest.h>

#include <cmath>
#include <random>
#include <vector>

#include "condition/conditioner.hpp"
#include "kernel_equality.hpp"
#include "resample/bit_rate_estimate.hpp"
#include "resample/resampler.hpp"
#include "synth/renderer.hpp"

using namespace salvor;

namespace {

std::vector<uint8_t> track_bits(size_t sectors, size_t preamble_bits, size_t data_bits, uint32_t seed) {
  std::mt19937 rng(seed);
  std::vector<uint8_t> bits;
  for (size_t s = 0; s < sectors; ++s) {
    for (size_t k = 0; k < preamble_bits; ++k) bits.push_back(k % 2 == 0 ? 1 : 0);  // NRZ ++--
    for (size_t k = 0; k < data_bits; ++k) bits.push_back(static_cast<uint8_t>(rng() & 1u));
  }
  return bits;
}

synth::RenderConfig render_config(double samples_per_bit, double speed_offset) {
  synth::RenderConfig c;
  c.model = synth::PulseModel::lorentzian;
  c.density = 2.0;
  c.samples_per_bit = samples_per_bit;
  c.lead_bits = 200;
  c.tail_bits = 200;
  c.sampling_phase = 0.31;
  c.spindle.offset = speed_offset;
  c.noise.snr_db = 25.0;
  c.front_end.lowpass_order = 2;
  c.front_end.lowpass_corner_rel = 0.6;
  c.digitizer.format = synth::SampleFormat::int16;
  c.digitizer.full_scale = 2.5;
  return c;
}

std::vector<float> render(synth::Renderer& r) {
  std::vector<float> x(r.total_samples());
  size_t n = 0;
  while (n < x.size()) {
    const auto p = r.process(std::span<float>(x).subspan(n));
    if (p.produced == 0) break;
    n += p.produced;
  }
  x.resize(n);
  return x;
}

}  // namespace

// Within 0.05 % of the simulator's true mean bit rate f0 / (1 - offset)
// (tools/synth/renderer.hpp, SpindleWarp).
TEST(SynthCapture, BitRateWithinFiveHundredthsOfAPercent) {
  const auto bits = track_bits(10, 96, 1500, 5);
  synth::MediaNoise media;
  media.jitter_bits = 0.03;
  const auto written = synth::write_track(bits, media, 77);
  for (const auto& [spb, offset] : std::vector<std::pair<double, double>>{{2.3, 0.008}, {3.7, -0.006}, {2.0, 0.0001}}) {
    synth::Renderer r(render_config(spb, offset), written, nullptr);
    const auto x = render(r);
    BitRateEstimateConfig cfg;
    cfg.sample_rate_hz = spb * 100e6;  // nominal bit rate f0 = 100 Mb/s
    cfg.nominal_bit_rate_hz = 100e6;
    const auto e = estimate_bit_rate(x, cfg);
    const double truth = 100e6 / (1.0 - offset);
    EXPECT_LE(std::abs(e.bit_rate_hz / truth - 1.0), 5e-4) << "spb " << spb << " offset " << offset;
    EXPECT_GE(e.preamble_segments, 8u);
    RecordProperty("relative_error_spb_" + std::to_string(spb), std::to_string(e.bit_rate_hz / truth - 1.0));
  }
}

// A simulated thermal asperity and dropout are flagged where the simulator put them, and
// every sample the simulator's digitizer clipped (the pop drives it into its rail) is
// flagged; the few others flagged lie within the stated margin (0.2 %) below full scale.
TEST(SynthCapture, ConditionerFlagsSimulatedDamage) {
  const auto bits = track_bits(4, 96, 3000, 6);
  const auto written = synth::write_track(bits, synth::MediaNoise{}, 78);
  auto c = render_config(3.0, 0.0);
  c.front_end.dc_offset = 0.1;
  c.asperities.push_back({4000.0, 2.0, 4.0, 300.0});
  c.dropouts.push_back({9000.0, 200.0, 0.97, 2.0});
  synth::Renderer r(c, written, nullptr);
  const auto x = render(r);
  ConditionerConfig cc;
  cc.sample_rate_hz = 300e6;
  cc.bit_rate_hz = 100e6;
  cc.full_scale = 1.0;  // the renderer's digitizer output is normalised to +-1
  Conditioner chain(cc);
  std::vector<float> y(x.size());
  std::vector<uint8_t> f(x.size());
  auto p = chain.process(x, y, f);
  chain.flush(std::span<float>(y).subspan(p.produced), std::span<uint8_t>(f).subspan(p.produced));
  const auto s = chain.summary();
  auto sample_of = [&](double bit) { return r.index_sample() + c.spindle.time_at(bit) * c.samples_per_bit; };
  size_t ta = 0, drop = 0;
  for (const auto& sp : s.spans) {
    if (sp.kind == flag_thermal_asperity) {
      ++ta;
      EXPECT_NEAR(static_cast<double>(sp.start), sample_of(4000.0), 16 * 3.0);
    } else if (sp.kind == flag_dropout) {
      ++drop;
      EXPECT_NEAR(static_cast<double>(sp.start), sample_of(9000.0), 16 * 3.0);
      EXPECT_NEAR(static_cast<double>(sp.end), sample_of(9200.0), 16 * 3.0);
    }
  }
  EXPECT_EQ(ta, 1u);
  EXPECT_EQ(drop, 1u);
  EXPECT_GT(r.clipped_samples(), 0u);
  const float top = 32767.0f / 32768.0f;  // int16 rails after normalisation to +-1
  uint64_t at_rail = 0, near_rail = 0;
  for (size_t i = 0; i < x.size(); ++i) {
    if (x[i] >= top || x[i] <= -1.0f) {
      ++at_rail;
      EXPECT_TRUE(f[i] & flag_clipped) << i;
    } else if (std::abs(x[i]) >= 0.998f) {
      ++near_rail;
    }
  }
  EXPECT_EQ(at_rail, r.clipped_samples());
  EXPECT_EQ(s.clipped_samples, at_rail + near_rail);
}

// The resampler's SIMD kernels equal the scalar reference (kernel_equality.hpp) on
// simulated readback: a capture at 2.5 samples per bit to 2 (ratio 5/4, exact polyphase)
// and the same capture to 2 samples per bit of a bit rate 0.8 % off nominal
// (interpolated table).
TEST(SynthCapture, ResamplerKernelsMatchTheScalarReference) {
  const auto bits = track_bits(4, 96, 3000, 7);
  const auto written = synth::write_track(bits, synth::MediaNoise{}, 79);
  synth::Renderer r(render_config(2.5, 0.0), written, nullptr);
  const auto x = render(r);
  ASSERT_GT(x.size(), 20000u);
  for (double bit_rate : {100e6, 100e6 / (1.0 - 0.008)}) {
    const auto c = ResamplerConfig::for_bit_rate(250e6, bit_rate, 2.0);
    EXPECT_GE(salvor::testing::expect_kernels_match_reference(c, x, "bit rate " + std::to_string(bit_rate)), 1u);
  }
}
