#include <gtest/gtest.h>

#include <cmath>
#include <random>
#include <vector>

#include "../resample/readback_fixture.hpp"
#include "chunking.hpp"
#include "common/error.hpp"
#include "condition/conditioner.hpp"
#include "resample/resampler.hpp"

using namespace salvor;
using namespace salvor::testing;

namespace {

constexpr double spb = 3.3;

// A damaged capture: Lorentzian readback (PW50 = 2.5 T) scaled to 0.4 of full scale, DC
// offset 0.05, a thermal asperity (1.25 x the peak, 300-bit decay; below full scale), a
// saturating burst and a 150-bit dropout, plus white noise.
struct Damaged {
  std::vector<float> x;
  size_t ta_onset, clip_start, clip_end, drop_start, drop_end;
};

Damaged damaged_capture(uint32_t seed) {
  ReadbackSpec s;
  s.bit_rate_hz = 1.0;
  s.sample_rate_hz = spb;
  s.amplitude = 0.4;
  s.truncate_bits = 24;
  const size_t bits = 12000;
  Damaged d;
  d.x = lorentzian_readback(random_nrz(bits, seed), s, static_cast<size_t>(bits * spb));
  std::mt19937 rng(seed);
  std::normal_distribution<float> g(0.0f, 0.01f);
  d.ta_onset = static_cast<size_t>(4000 * spb);
  d.clip_start = static_cast<size_t>(8000 * spb);
  d.clip_end = static_cast<size_t>(8040 * spb);
  d.drop_start = static_cast<size_t>(10000 * spb);
  d.drop_end = static_cast<size_t>(10150 * spb);
  for (size_t i = 0; i < d.x.size(); ++i) {
    float v = d.x[i];
    if (i >= d.drop_start && i < d.drop_end) v *= 0.03f;
    if (i >= d.ta_onset) {
      const double t = (static_cast<double>(i) - d.ta_onset) / spb;
      v += static_cast<float>(0.5 * (1.0 - std::exp(-t)) * std::exp(-t / 300.0));
    }
    if (i >= d.clip_start && i < d.clip_end) v *= 4.0f;
    v += 0.05f + g(rng);
    d.x[i] = std::clamp(v, -1.0f, 1.0f);
  }
  return d;
}

ConditionerConfig config() {
  ConditionerConfig c;
  c.sample_rate_hz = spb * 50e6;
  c.bit_rate_hz = 50e6;
  c.full_scale = 1.0;
  return c;
}

Flagged run_chain(Conditioner& chain, const std::vector<float>& x, size_t chunk) {
  Flagged r;
  std::vector<float> ox(chunk);
  std::vector<uint8_t> of(chunk);
  for (size_t pos = 0; pos < x.size();) {
    const size_t n = std::min(chunk, x.size() - pos);
    const auto p = chain.process(std::span<const float>(x).subspan(pos, n), std::span<float>(ox.data(), n),
                                 std::span<uint8_t>(of.data(), n));
    r.x.insert(r.x.end(), ox.begin(), ox.begin() + static_cast<ptrdiff_t>(p.produced));
    r.f.insert(r.f.end(), of.begin(), of.begin() + static_cast<ptrdiff_t>(p.produced));
    pos += p.consumed;
  }
  std::vector<float> tx(chain.pending());
  std::vector<uint8_t> tf(tx.size());
  const auto p = chain.flush(tx, tf);
  r.x.insert(r.x.end(), tx.begin(), tx.begin() + static_cast<ptrdiff_t>(p.produced));
  r.f.insert(r.f.end(), tf.begin(), tf.begin() + static_cast<ptrdiff_t>(p.produced));
  return r;
}

}  // namespace

TEST(Conditioner, ChunkingInvariance) {
  const auto d = damaged_capture(1);
  Conditioner whole(config());
  const auto ref = run_chain(whole, d.x, d.x.size());
  ASSERT_EQ(ref.x.size(), d.x.size());
  const auto ref_spans = whole.summary().spans;
  for (size_t chunk : {size_t{1}, size_t{7}, size_t{4096}}) {
    Conditioner c(config());
    EXPECT_TRUE(run_chain(c, d.x, chunk) == ref) << chunk;
    EXPECT_EQ(c.summary().spans, ref_spans);
  }
  whole.reset();
  EXPECT_TRUE(run_chain(whole, d.x, 5000) == ref);
}

// Every kind of damage is found where it was put, and the summary counts agree with the
// flag stream.
TEST(Conditioner, FindsTheDamageAndSummarises) {
  const auto d = damaged_capture(2);
  Conditioner chain(config());
  const auto r = run_chain(chain, d.x, 4096);
  const auto s = chain.summary();
  EXPECT_EQ(s.samples, d.x.size());
  double mean = 0.0;
  for (float v : d.x) mean += v;
  EXPECT_NEAR(s.dc_offset, mean / static_cast<double>(d.x.size()), 1e-9);
  uint64_t clipped = 0;
  for (uint8_t f : r.f) clipped += (f & flag_clipped) ? 1 : 0;
  EXPECT_EQ(s.clipped_samples, clipped);
  EXPECT_DOUBLE_EQ(s.clipped_fraction, static_cast<double>(clipped) / static_cast<double>(d.x.size()));
  size_t ta = 0, drop = 0, clip = 0;
  for (const auto& sp : s.spans) {
    if (sp.kind == flag_thermal_asperity) {
      ++ta;
      EXPECT_NEAR(static_cast<double>(sp.start), static_cast<double>(d.ta_onset), 16 * spb);
    } else if (sp.kind == flag_dropout) {
      ++drop;
      EXPECT_GE(sp.start, d.drop_start);
      EXPECT_LE(static_cast<double>(sp.start), d.drop_start + 16 * spb);
      EXPECT_LE(sp.end, d.drop_end);
      EXPECT_GE(static_cast<double>(sp.end), d.drop_end - 16 * spb);
    } else {
      ++clip;
      EXPECT_GE(sp.start, d.clip_start);
      EXPECT_LE(sp.end, d.clip_end);
    }
  }
  EXPECT_EQ(ta, 1u);
  EXPECT_EQ(drop, 1u);
  EXPECT_GE(clip, 1u);
  // Away from the damage the output sits at the AGC reference (rms 1, within 5 %).
  const auto quiet = std::span<const float>(r.x).subspan(static_cast<size_t>(2000 * spb), static_cast<size_t>(1500 * spb));
  EXPECT_NEAR(rms(quiet), 1.0, 0.05);
}

// Flags reach the resampler's output grid: the resampled flags equal the conditioner's
// spans mapped by map_span_to_output (the time map t_n = n * ratio).
TEST(Conditioner, FlagsSurviveResampling) {
  const auto d = damaged_capture(3);
  Conditioner chain(config());
  const auto r = run_chain(chain, d.x, 4096);
  const auto spans = chain.summary().spans;
  auto rc = ResamplerConfig::for_bit_rate(config().sample_rate_hz, config().bit_rate_hz * 1.002, 2.0);
  Resampler res(rc);
  std::vector<float> out(static_cast<size_t>(r.x.size() / res.ratio()) + 16);
  std::vector<uint8_t> out_f(out.size());
  auto p = res.process(r.x, r.f, out, out_f);
  ASSERT_EQ(p.consumed, r.x.size());
  size_t n = p.produced;
  p = res.flush(std::span<float>(out).subspan(n), std::span<uint8_t>(out_f).subspan(n));
  n += p.produced;
  out_f.resize(n);
  std::vector<uint8_t> expect(n, 0);
  for (const auto& sp : spans) {
    const auto m = map_span_to_output(sp, 0.0, res.ratio(), res.flag_reach());
    for (uint64_t k = m.start; k < std::min<uint64_t>(m.end, n); ++k) expect[k] |= sp.kind;
  }
  EXPECT_EQ(out_f, expect);
}

TEST(Conditioner, BadInputAndSettingsGetClearErrors) {
  Conditioner chain(config());
  std::vector<float> x(100, 0.1f), y(100);
  x[42] = std::numeric_limits<float>::infinity();
  try {
    chain.process(x, y);
    FAIL();
  } catch (const Error& e) {
    EXPECT_EQ(e.kind(), ErrorKind::input);
    EXPECT_NE(std::string(e.what()).find("sample 42"), std::string::npos) << e.what();
  }
  auto c = config();
  c.bit_rate_hz = c.sample_rate_hz * 2;
  EXPECT_THROW(Conditioner{c}, Error);
  c = config();
  c.thermal_asperity.detect_ratio = 0.1;
  try {
    Conditioner bad(c);
    FAIL();
  } catch (const Error& e) {
    EXPECT_EQ(e.kind(), ErrorKind::usage);
    EXPECT_NE(std::string(e.what()).find("detect_ratio"), std::string::npos) << e.what();
  }
  Conditioner small(config());
  std::vector<float> z(5000, 0.0f), zo(5000);
  small.process(z, zo);
  std::vector<float> tiny(1);
  std::vector<uint8_t> tinyf(1);
  EXPECT_THROW(small.flush(tiny, tinyf), Error);
}
