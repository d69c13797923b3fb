#include <gtest/gtest.h>

#include <cmath>
#include <random>
#include <vector>

#include "common/error.hpp"
#include "readback_fixture.hpp"
#include "resample/bit_rate_estimate.hpp"

using namespace salvor;
using namespace salvor::testing;

namespace {

struct Case {
  double samples_per_bit;  // nominal, at the nominal bit rate
  double speed_offset;     // true bit rate = nominal * (1 + offset)
  double pw50_bits;
  uint32_t seed;
};

// A track-like capture: sectors of a 2T preamble and random data, Lorentzian readback
// (read-channel-theory.md section 1), additive white Gaussian noise at 25 dB below the
// isolated-pulse peak (common practice, no source), sampled asynchronously.
std::vector<float> capture(const Case& c, double nominal_bit_rate, double sample_rate, size_t preamble_bits,
                           size_t data_bits, size_t sectors) {
  ReadbackSpec s;
  s.sample_rate_hz = sample_rate;
  s.bit_rate_hz = nominal_bit_rate * (1.0 + c.speed_offset);
  s.pw50_bits = c.pw50_bits;
  s.first_bit_time_s = 0.37 / s.bit_rate_hz;  // the sample clock is not aligned to bits
  s.truncate_bits = 24;
  const auto nrz = preamble_sectors(sectors, preamble_bits, data_bits, c.seed);
  const size_t n = static_cast<size_t>(static_cast<double>(nrz.size()) * sample_rate / s.bit_rate_hz) - 8;
  auto x = lorentzian_readback(nrz, s, n);
  std::mt19937 rng(c.seed + 1);
  std::normal_distribution<float> g(0.0f, static_cast<float>(std::pow(10.0, -25.0 / 20.0)));
  for (auto& v : x) v += g(rng);
  return x;
}

}  // namespace

// Target: within 0.05 % of the true bit rate (the PLL refines further), with and without
// a nominal rate, at 2.3-5 samples per bit and speed offsets -1 % .. +1 %.
TEST(BitRateEstimate, WithinFiveHundredthsOfAPercentOnLorentzianCaptures) {
  const double nominal = 100e6;
  const Case cases[] = {
      {2.3, -0.01, 2.0, 1}, {2.3, 0.0063, 2.5, 2}, {3.1, 0.01, 2.5, 3},
      {3.7, -0.0042, 3.0, 4}, {5.0, 0.0081, 2.5, 5}, {4.4, -0.0097, 2.0, 6},
  };
  double worst = 0.0;
  for (const auto& c : cases) {
    const double fs = nominal * c.samples_per_bit;
    const auto x = capture(c, nominal, fs, 96, 1400, 12);
    const double truth = nominal * (1.0 + c.speed_offset);
    for (bool with_nominal : {true, false}) {
      BitRateEstimateConfig cfg;
      cfg.sample_rate_hz = fs;
      cfg.nominal_bit_rate_hz = with_nominal ? nominal : 0.0;
      const auto e = estimate_bit_rate(x, cfg);
      const double err = e.bit_rate_hz / truth - 1.0;
      worst = std::max(worst, std::abs(err));
      EXPECT_LE(std::abs(err), 5e-4) << "sps " << c.samples_per_bit << " offset " << c.speed_offset
                                     << " nominal " << with_nominal << " coarse " << e.coarse_bit_rate_hz / truth - 1.0;
      EXPECT_LE(std::abs(e.coarse_bit_rate_hz / truth - 1.0), 0.01) << "coarse line";
      EXPECT_GE(e.preamble_segments, 10u);
      EXPECT_LE(e.preamble_segments, 12u);
      // Measured separation: >= 5.9 dB here, 0.3 dB on random data alone (next test).
      EXPECT_GT(e.line_to_floor_db, 4.0) << c.samples_per_bit << " " << with_nominal;
      // The scatter figure is an honest error bar: the error is within 5 sigma of it.
      EXPECT_LE(std::abs(err), 5.0 * e.relative_std + 2e-5);
    }
  }
  RecordProperty("worst_relative_error", std::to_string(worst));
}

// Random data alone carries no 2T line: no preamble segment is found and the quality
// figure says so.
TEST(BitRateEstimate, NoPreambleNoSegments) {
  ReadbackSpec s;
  s.sample_rate_hz = 300e6;
  s.bit_rate_hz = 100e6;
  s.truncate_bits = 24;
  const auto x = lorentzian_readback(random_nrz(20000, 9), s, 59000);
  BitRateEstimateConfig cfg;
  cfg.sample_rate_hz = 300e6;
  cfg.nominal_bit_rate_hz = 100e6;
  const auto e = estimate_bit_rate(x, cfg);
  EXPECT_EQ(e.preamble_segments, 0u);
  EXPECT_FALSE(e.refined());
  EXPECT_LT(e.line_to_floor_db, 2.0);
  RecordProperty("line_to_floor_db", std::to_string(e.line_to_floor_db));
}

TEST(BitRateEstimate, RefineAppliesThePllCorrection) {
  EXPECT_DOUBLE_EQ(refine_bit_rate(100e6, 0.0004), 100.04e6);
  EXPECT_THROW(refine_bit_rate(100e6, 0.5), Error);
  EXPECT_THROW(refine_bit_rate(-1.0, 0.0), Error);
}

TEST(BitRateEstimate, BadInputGetsClearErrors) {
  BitRateEstimateConfig cfg;
  std::vector<float> x(4096, 0.0f);
  EXPECT_THROW(estimate_bit_rate(x, cfg), Error);  // no sample rate
  cfg.sample_rate_hz = 250e6;
  x[100] = std::nanf("");
  try {
    estimate_bit_rate(x, cfg);
    FAIL();
  } catch (const Error& e) {
    EXPECT_EQ(e.kind(), ErrorKind::input);
    EXPECT_NE(std::string(e.what()).find("sample 100"), std::string::npos) << e.what();
  }
  x[100] = 0.0f;
  cfg.segment_samples = 300;
  EXPECT_THROW(estimate_bit_rate(x, cfg), Error);
  cfg.segment_samples = 256;
  cfg.nominal_bit_rate_hz = 250e6;  // one sample per bit
  EXPECT_THROW(estimate_bit_rate(x, cfg), Error);
}

// The streaming stages give the same answer whatever the chunking.
TEST(BitRateEstimate, StagesAreChunkingInvariant) {
  const Case c{3.3, 0.004, 2.5, 21};
  const auto x = capture(c, 100e6, 330e6, 80, 900, 6);
  LineSpectrum whole(256, 4);
  whole.process(x);
  PreambleToneFit fit_whole(1.0 / (4 * 3.3), 24, 0.3);
  fit_whole.process(x);
  fit_whole.finish();
  for (size_t chunk : {size_t{1}, size_t{7}, size_t{4096}}) {
    LineSpectrum s(256, 4);
    PreambleToneFit f(1.0 / (4 * 3.3), 24, 0.3);
    for (size_t i = 0; i < x.size(); i += chunk) {
      const auto part = std::span<const float>(x).subspan(i, std::min(chunk, x.size() - i));
      s.process(part);
      f.process(part);
    }
    f.finish();
    EXPECT_EQ(s.statistic(), whole.statistic()) << chunk;
    EXPECT_EQ(f.segments(), fit_whole.segments());
    EXPECT_DOUBLE_EQ(f.line_cycles_per_sample(), fit_whole.line_cycles_per_sample());
  }
}
