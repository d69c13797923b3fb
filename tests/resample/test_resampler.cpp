#include <gtest/gtest.h>

#include <soxr.h>

#include <algorithm>
#include <cmath>
#include <random>
#include <vector>

#include "common/error.hpp"
#include "kernel_equality.hpp"
#include "readback_fixture.hpp"
#include "resample/resampler.hpp"

using namespace salvor;
using namespace salvor::testing;

namespace {

// Feeds `in` in chunks of `chunk` inputs (output room `out_room` per call), then flushes.
std::vector<float> run_chunked(Resampler& r, const std::vector<float>& in, size_t chunk, size_t out_room,
                               std::vector<uint8_t>* flags_out = nullptr,
                               const std::vector<uint8_t>* flags_in = nullptr) {
  std::vector<float> out, buf(out_room);
  std::vector<uint8_t> fbuf(out_room);
  size_t pos = 0;
  while (pos < in.size()) {
    const size_t n = std::min(chunk, in.size() - pos);
    size_t used = 0;
    while (used < n) {
      std::span<const float> src(in.data() + pos + used, n - used);
      Progress p;
      if (flags_in) {
        p = r.process(src, std::span<const uint8_t>(flags_in->data() + pos + used, n - used), buf, fbuf);
        flags_out->insert(flags_out->end(), fbuf.begin(), fbuf.begin() + static_cast<ptrdiff_t>(p.produced));
      } else {
        p = r.process(src, buf);
      }
      out.insert(out.end(), buf.begin(), buf.begin() + static_cast<ptrdiff_t>(p.produced));
      used += p.consumed;
      if (p.consumed == 0 && p.produced == 0) ADD_FAILURE() << "no progress";
    }
    pos += n;
  }
  for (;;) {
    Progress p = flags_in ? r.flush(buf, fbuf) : r.flush(buf);
    out.insert(out.end(), buf.begin(), buf.begin() + static_cast<ptrdiff_t>(p.produced));
    if (flags_in) flags_out->insert(flags_out->end(), fbuf.begin(), fbuf.begin() + static_cast<ptrdiff_t>(p.produced));
    if (p.produced == 0) break;
  }
  return out;
}

std::vector<float> run_whole(const ResamplerConfig& c, const std::vector<float>& in) {
  Resampler r(c);
  return run_chunked(r, in, in.size() + 1, static_cast<size_t>(in.size() / r.ratio()) + 64);
}

std::vector<float> noise(size_t n, uint32_t seed) {
  std::mt19937 rng(seed);
  std::normal_distribution<float> g(0.0f, 1.0f);
  std::vector<float> x(n);
  for (auto& v : x) v = g(rng);
  return x;
}

ResamplerConfig config(double in_rate, double out_rate) {
  ResamplerConfig c;
  c.input_rate_hz = in_rate;
  c.output_rate_hz = out_rate;
  return c;
}

// Output amplitude (relative) and residual of a tone, fitted at the output sample times
// t_n = input_position(n), skipping the edges where zero padding is inside the filter.
SineFit measure_tone(const ResamplerConfig& c, double f_in_cycles, size_t n_in) {
  const auto x = tone(n_in, f_in_cycles, 1.0, 0.3);
  Resampler r(c);
  const auto y = run_whole(c, x);
  const size_t skip = static_cast<size_t>(2 * r.half_taps() / r.ratio()) + 4;
  std::vector<float> ys(y.begin() + static_cast<ptrdiff_t>(skip), y.end() - static_cast<ptrdiff_t>(skip));
  std::vector<double> t(ys.size());
  for (size_t i = 0; i < ys.size(); ++i) t[i] = r.input_position(skip + i);
  return fit_sine(ys, t, 2.0 * pi * f_in_cycles);
}

}  // namespace

TEST(Resampler, RejectsBadConfigurationNamingTheField) {
  auto c = config(250e6, 0.0);
  try {
    Resampler r(c);
    FAIL() << "expected an error";
  } catch (const Error& e) {
    EXPECT_EQ(e.kind(), ErrorKind::usage);
    EXPECT_NE(std::string(e.what()).find("output_rate_hz"), std::string::npos) << e.what();
  }
  c = config(250e6, 200e6);
  c.passband_edge = 1.2;
  EXPECT_THROW(Resampler{c}, Error);
  c = config(250e6, 200e6);
  c.phases = 4;
  EXPECT_THROW(Resampler{c}, Error);
  EXPECT_THROW(ResamplerConfig::for_bit_rate(250e6, -1.0, 2.0), Error);
  // A NaN in the stream is an input error naming the sample.
  Resampler r(config(250e6, 200e6));
  std::vector<float> x(5000, 0.0f), y(5000);
  x[4321] = std::nanf("");
  try {
    r.process(x, y);
    FAIL() << "expected an error";
  } catch (const Error& e) {
    EXPECT_EQ(e.kind(), ErrorKind::input);
    EXPECT_NE(std::string(e.what()).find("sample 4321"), std::string::npos) << e.what();
  }
}

// The Kaiser beta formula against values computed from Kaiser (1974) by hand:
// 0.1102 * (90 - 8.7) = 8.95926; I0 series checked against scipy.special.i0(5.0) =
// 27.239871823604442 (python3-scipy, Debian).
TEST(Resampler, KaiserDesignHelpers) {
  EXPECT_NEAR(kaiser_beta(90.0), 8.95926, 1e-9);
  EXPECT_NEAR(bessel_i0(5.0), 27.239871823604442, 1e-10);
  EXPECT_NEAR(bessel_i0(0.0), 1.0, 0.0);
}

// Output sample count: ceil(N / ratio), the count scipy.signal.resample_poly gives
// (docs.scipy.org: "output length ceil(len(x) * up / down)").
TEST(Resampler, OutputCountAndPositions) {
  for (double out_rate : {200e6, 100e6, 400e6, 123.456e6}) {
    const auto c = config(250e6, out_rate);
    const auto x = noise(10007, 1);
    const auto y = run_whole(c, x);
    Resampler r(c);
    EXPECT_EQ(y.size(), static_cast<size_t>(std::ceil(10007.0 / r.ratio() - 1e-12))) << out_rate;
    EXPECT_DOUBLE_EQ(r.input_position(1000), 1000.0 * 250e6 / out_rate);
  }
}

// Chunking invariance (DEVELOPERS.md): chunks of 1, 7, 4096 and the whole, and small
// output room, give bit-identical samples and flags.
TEST(Resampler, ChunkingInvariance) {
  for (double out_rate : {200e6 * 1.0037, 611e6}) {
    auto c = config(250e6, out_rate);
    c.first_output_position = 3.25;
    const auto x = noise(20000, 2);
    std::vector<uint8_t> fin(x.size(), 0);
    for (size_t i = 5000; i < 5100; ++i) fin[i] = 1;
    for (size_t i = 12000; i < 12001; ++i) fin[i] = 4;
    Resampler whole_r(c);
    std::vector<uint8_t> f_whole;
    const auto whole = run_chunked(whole_r, x, x.size(), 100000, &f_whole, &fin);
    for (size_t chunk : {size_t{1}, size_t{7}, size_t{4096}}) {
      for (size_t room : {size_t{1}, size_t{5}, size_t{100000}}) {
        Resampler r(c);
        std::vector<uint8_t> f;
        const auto y = run_chunked(r, x, chunk, room, &f, &fin);
        ASSERT_EQ(y.size(), whole.size());
        EXPECT_TRUE(std::equal(y.begin(), y.end(), whole.begin())) << "chunk " << chunk << " room " << room;
        EXPECT_EQ(f, f_whole);
      }
    }
    // A copy taken mid-stream continues like the original.
    Resampler a(c);
    std::vector<float> buf(100000);
    auto p = a.process(std::span<const float>(x.data(), 777), buf);
    Resampler b = a;
    std::vector<float> ya(buf.begin(), buf.begin() + static_cast<ptrdiff_t>(p.produced));
    std::vector<float> rest(x.begin() + 777, x.end());
    auto t1 = run_chunked(a, rest, rest.size(), 100000);
    auto t2 = run_chunked(b, rest, 13, 100000);
    EXPECT_EQ(t1, t2);
    // reset() restarts the stream.
    a.reset();
    EXPECT_EQ(run_chunked(a, x, 4096, 100000), whole);
  }
}

// Flags follow the time map: the output flag span equals map_span_to_output of the input span.
TEST(Resampler, FlagsMapByTime) {
  auto c = config(250e6, 200e6 * 0.9931);
  Resampler r(c);
  const auto x = noise(30000, 3);
  std::vector<uint8_t> fin(x.size(), 0);
  const FlagSpan in_span{10000, 10333, flag_thermal_asperity};
  for (uint64_t i = in_span.start; i < in_span.end; ++i) fin[i] = flag_thermal_asperity;
  std::vector<uint8_t> fout;
  run_chunked(r, x, 4096, 100000, &fout, &fin);
  const FlagSpan expect = map_span_to_output(in_span, 0.0, r.ratio(), r.flag_reach());
  for (size_t n = 0; n < fout.size(); ++n) {
    const bool inside = n >= expect.start && n < expect.end;
    ASSERT_EQ(fout[n] != 0, inside) << "output " << n;
  }
  // Every flagged output is within reach of the flagged input span in capture time.
  EXPECT_GE(r.input_position(expect.start), in_span.start - r.flag_reach());
  EXPECT_LE(r.input_position(expect.end - 1), in_span.end - 1 + r.flag_reach());
  EXPECT_LT(r.input_position(expect.start - 1), in_span.start - r.flag_reach());
}

// Passband: up to the passband edge (0.8 of the lower Nyquist) the tabulated filter is
// flat within +-0.01 dB for every fractional phase (stated bound in resampler.hpp).
TEST(Resampler, PassbandRippleOfTheTable) {
  for (double out_rate : {200e6 * 1.0037, 500e6}) {
    Resampler r(config(250e6, out_rate));
    double worst = 0.0;
    for (double mu = 0.0; mu < 1.0; mu += 0.0371) {
      for (double f = 0.0; f <= r.spec().passband_edge + 1e-12; f += r.spec().passband_edge / 40) {
        worst = std::max(worst, std::abs(20.0 * std::log10(r.response(f, mu))));
      }
    }
    EXPECT_LE(worst, 0.01) << out_rate;
    RecordProperty("worst_ripple_db_" + std::to_string(static_cast<int>(out_rate / 1e6)), std::to_string(worst));
  }
}

// Measured on tones through the whole streaming path: amplitude within 0.01 dB, phase at
// the stated sample times within 1e-4 rad (delay bookkeeping: output n sits at input
// position t_n), and residual below -80 dB of the tone.
TEST(Resampler, TonesInThePassbandKeepAmplitudeAndPhase) {
  const double in_rate = 250e6;
  for (double out_rate : {200e6 * 1.0037, 200e6 * 0.9913, 611e6}) {
    auto c = config(in_rate, out_rate);
    c.first_output_position = 1.375;
    Resampler r(c);
    const double lower_nyq = 0.5 / std::max(1.0, r.ratio());
    for (double frac : {0.05, 0.3, 0.55, 0.8}) {
      const double f = frac * lower_nyq;
      const auto fit = measure_tone(c, f, 40000);
      EXPECT_LE(std::abs(20.0 * std::log10(fit.amplitude)), 0.01) << out_rate << " f " << frac;
      EXPECT_NEAR(std::remainder(fit.phase - 0.3, 2.0 * pi), 0.0, 1e-4) << out_rate << " f " << frac;
      EXPECT_LE(20.0 * std::log10(fit.residual_rms / fit.amplitude), -80.0) << out_rate << " f " << frac;
    }
  }
}

// Stopband: a tone between the new Nyquist and the input Nyquist (when decimating) must
// come out at least 80 dB down (its alias is all that remains).
TEST(Resampler, StopbandAttenuationAtLeast80dB) {
  const double in_rate = 250e6;
  double worst_db = -400.0;
  for (double out_rate : {200e6 * 1.0037, 100e6 * 1.011}) {
    auto c = config(in_rate, out_rate);
    Resampler r(c);
    const double out_nyq_in_cycles = 0.5 / r.ratio();
    for (double frac : {1.0, 1.02, 1.1, 1.3, 1.6, 2.0, 2.4}) {
      const double f = frac * out_nyq_in_cycles;
      if (f >= 0.499) continue;
      const auto x = tone(60000, f, 1.0, 0.1);
      const auto y = run_whole(c, x);
      const size_t skip = static_cast<size_t>(2 * r.half_taps() / r.ratio()) + 4;
      const double level = rms(std::span<const float>(y).subspan(skip, y.size() - 2 * skip)) / rms(x);
      EXPECT_LE(20.0 * std::log10(level), -80.0) << "out " << out_rate << " tone at " << frac << " x new Nyquist";
      worst_db = std::max(worst_db, 20.0 * std::log10(level));
    }
  }
  RecordProperty("worst_alias_db", std::to_string(worst_db));
}

// Against scipy.signal.resample_poly (python3-scipy 1.10.1, Debian) given an independent
// Kaiser FIR from scipy.signal.firwin with the same cutoff and beta: a Lorentzian readback
// (PW50 = 2.5 T, Bergmans 1996) captured at 5 samples per bit, resampled to 4 samples per
// bit (ratio 5/4). Both approximate the same ideal band-limited interpolation, so they
// must agree to the stopband level: rms difference <= -80 dB of the signal.
TEST(Resampler, AgreesWithScipyResamplePoly) {
  ReadbackSpec s;
  s.bit_rate_hz = 50e6;
  s.sample_rate_hz = 250e6;
  const auto x = lorentzian_readback(random_nrz(8000, 11), s, 38000);
  auto c = config(250e6, 200e6);
  Resampler r(c);
  const auto y = run_whole(c, x);
  const auto dir = scratch_dir("resample-poly");
  write_f32(dir / "in.f32", x);
  const int up = 4, down = 5;
  const int numtaps = 200 * up + 1;
  ASSERT_EQ(run_oracle(std::string(SALVOR_SOURCE_DIR) + "/tests/resample/oracle_resample_poly.py",
                       {(dir / "in.f32").string(), (dir / "out.f32").string(), std::to_string(up),
                        std::to_string(down), std::to_string(numtaps), std::to_string(r.spec().kaiser_beta),
                        std::to_string(r.spec().cutoff)}),
            0);
  const auto ref = read_f32(dir / "out.f32");
  std::filesystem::remove_all(dir);
  ASSERT_EQ(ref.size(), y.size());
  const size_t skip = 200;
  double d2 = 0.0, s2 = 0.0;
  for (size_t i = skip; i + skip < y.size(); ++i) {
    d2 += (y[i] - ref[i]) * static_cast<double>(y[i] - ref[i]);
    s2 += static_cast<double>(ref[i]) * ref[i];
  }
  RecordProperty("difference_db", std::to_string(10.0 * std::log10(d2 / s2)));
  EXPECT_LE(10.0 * std::log10(d2 / s2), -80.0);
}

// Against libsoxr (libsoxr-dev, Debian; SOXR_VHQ, linear phase) on an irrational ratio,
// where every fractional phase is visited: a readback (PW50 = 3 T) at 250 MHz, 4.1 samples
// per bit with a +0.37 % speed offset, to 3 samples per bit. At the passband edge
// (0.8 x 1.5/T = 0.6/T) the Lorentzian spectrum is down exp(-2 pi 3 0.6) = -49 dB
// (H(f) of section 1 of read-channel-theory.md), so the two filters' different transition
// bands matter little: rms difference <= -90 dB.
TEST(Resampler, AgreesWithLibsoxr) {
  ReadbackSpec s;
  s.sample_rate_hz = 250e6;
  s.bit_rate_hz = 250e6 / 4.1 * 1.0037;
  s.pw50_bits = 3.0;
  s.truncate_bits = 1000;  // truncated 1/t^2 tails would add broadband steps
  const auto x = lorentzian_readback(random_nrz(12000, 12), s, 30000);
  const auto c = ResamplerConfig::for_bit_rate(250e6, s.bit_rate_hz, 3.0);
  Resampler r(c);
  const auto y = run_whole(c, x);
  std::vector<float> ref(y.size() + 100, 0.0f);
  size_t idone = 0, odone = 0;
  soxr_quality_spec_t q = soxr_quality_spec(SOXR_VHQ, SOXR_LINEAR_PHASE);
  soxr_io_spec_t io = soxr_io_spec(SOXR_FLOAT32_I, SOXR_FLOAT32_I);
  ASSERT_EQ(soxr_oneshot(c.input_rate_hz, c.output_rate_hz, 1, x.data(), x.size(), &idone, ref.data(),
                         ref.size(), &odone, &io, &q, nullptr),
            nullptr);
  ASSERT_GE(odone + 2, y.size());
  const size_t skip = 300;
  double d2 = 0.0, s2 = 0.0;
  for (size_t i = skip; i + skip < std::min(odone, y.size()); ++i) {
    d2 += (y[i] - ref[i]) * static_cast<double>(y[i] - ref[i]);
    s2 += static_cast<double>(ref[i]) * ref[i];
  }
  RecordProperty("difference_db", std::to_string(10.0 * std::log10(d2 / s2)));
  EXPECT_LE(10.0 * std::log10(d2 / s2), -90.0);
}

TEST(Resampler, FlagSpanMappingEdgeCases) {
  EXPECT_EQ(map_span_to_output({10, 10, flag_clipped}, 0.0, 2.0, 1.0).end,
            map_span_to_output({10, 10, flag_clipped}, 0.0, 2.0, 1.0).start);
  // Ratio 2, reach 0: inputs 4..7 contain output times 4 and 6 -> outputs 2, 3.
  const auto m = map_span_to_output({4, 8, flag_dropout}, 0.0, 2.0, 0.0);
  EXPECT_EQ(m.start, 2u);
  EXPECT_EQ(m.end, 4u);
  EXPECT_EQ(m.kind, flag_dropout);
}

// The exact polyphase path is taken for ratios P/Q with small Q (2.5 -> 2 samples per bit
// is 5/4, 250 -> 500 MHz is 1/2) and not for an arbitrary capture rate.
TEST(Resampler, ExactPolyphaseIsChosenForSmallDenominators) {
  EXPECT_EQ(Resampler(config(250e6, 200e6)).spec().exact_phases, 4);
  EXPECT_EQ(Resampler(config(250e6, 500e6)).spec().exact_phases, 2);
  EXPECT_EQ(Resampler(config(240e6, 200e6)).spec().exact_phases, 5);  // 6/5, not exact in binary
  EXPECT_EQ(Resampler(config(250e6, 200e6 * 1.0037)).spec().exact_phases, 0);
  auto c = config(250e6, 200e6);
  c.max_exact_denominator = 0;
  EXPECT_EQ(Resampler(c).spec().exact_phases, 0);
  c.max_exact_denominator = -1;
  EXPECT_THROW(Resampler{c}, Error);
}

// Chunking invariance (DEVELOPERS.md) on the exact path, with a fractional first output
// position and flags: chunks of 1, 7, 4096 and small output room give identical results.
TEST(Resampler, ExactPolyphaseChunkingInvariance) {
  for (double out_rate : {200e6, 240e6 * 5 / 6, 500e6}) {
    auto c = config(250e6, out_rate);
    c.first_output_position = 3.25;
    const auto x = noise(20000, 21);
    std::vector<uint8_t> fin(x.size(), 0);
    for (size_t i = 5000; i < 5100; ++i) fin[i] = 1;
    fin[12000] = 4;
    Resampler whole_r(c);
    ASSERT_GT(whole_r.spec().exact_phases, 0);
    std::vector<uint8_t> f_whole;
    const auto whole = run_chunked(whole_r, x, x.size(), 100000, &f_whole, &fin);
    EXPECT_EQ(whole.size(), static_cast<size_t>(std::ceil((20000.0 - 3.25) / whole_r.ratio())));
    for (size_t chunk : {size_t{1}, size_t{7}, size_t{4096}}) {
      for (size_t room : {size_t{1}, size_t{5}, size_t{100000}}) {
        Resampler r(c);
        std::vector<uint8_t> f;
        const auto y = run_chunked(r, x, chunk, room, &f, &fin);
        ASSERT_EQ(y.size(), whole.size());
        EXPECT_TRUE(std::equal(y.begin(), y.end(), whole.begin())) << "chunk " << chunk << " room " << room;
        EXPECT_EQ(f, f_whole);
      }
    }
    // Flags follow the same time map as on the interpolated path.
    const FlagSpan expect = map_span_to_output({5000, 5100, flag_clipped}, c.first_output_position, whole_r.ratio(),
                                               whole_r.flag_reach());
    for (size_t n = expect.start > 3 ? expect.start - 3 : 0; n < expect.end + 3; ++n)
      EXPECT_EQ((f_whole[n] & 1) != 0, n >= expect.start && n < expect.end) << out_rate << " output " << n;
  }
}

// The exact path designs each phase at its exact offset; the interpolated table
// approximates the same design by linear interpolation between 512 phases. The
// interpolation error of the coefficients is a(1-a)/2 (1/512)^2 h''(mu - j) (Taylor
// remainder of linear interpolation), i.e. a filter of response (2 pi f)^2 / 8 (1/512)^2
// times the design's: at the passband edge of ratio 5/4 (f = 0.32 cycles per sample)
// 1.9e-6 of the signal, -114 dB. The bound checked, -100 dB, leaves margin. First output
// positions off the table's grid (0.37 + r / 4 is never p / 512), so that the table
// really interpolates.
TEST(Resampler, ExactPathAgreesWithInterpolatedTable) {
  ReadbackSpec s;
  s.bit_rate_hz = 100e6;
  s.sample_rate_hz = 250e6;
  const auto x = lorentzian_readback(random_nrz(12000, 13), s, 30000);
  for (double first : {0.37, 2.3}) {
    auto c = config(250e6, 200e6);
    c.first_output_position = first;
    const auto exact = run_whole(c, x);
    c.max_exact_denominator = 0;
    const auto table = run_whole(c, x);
    ASSERT_EQ(exact.size(), table.size());
    double d2 = 0.0, s2 = 0.0;
    for (size_t i = 0; i < exact.size(); ++i) {
      d2 += (exact[i] - table[i]) * static_cast<double>(exact[i] - table[i]);
      s2 += static_cast<double>(exact[i]) * exact[i];
    }
    RecordProperty("difference_db_first_" + std::to_string(first), std::to_string(10.0 * std::log10(d2 / s2)));
    EXPECT_LE(10.0 * std::log10(d2 / s2), -100.0) << first;
  }
}

// Tones through the exact path keep amplitude (0.01 dB), phase at t_n (1e-4 rad) and
// residual (-80 dB), the bounds of the interpolated path's test above.
TEST(Resampler, TonesThroughTheExactPath) {
  for (double out_rate : {200e6, 500e6}) {
    auto c = config(250e6, out_rate);
    c.first_output_position = 1.375;
    Resampler r(c);
    ASSERT_GT(r.spec().exact_phases, 0);
    const double lower_nyq = 0.5 / std::max(1.0, r.ratio());
    for (double frac : {0.05, 0.3, 0.55, 0.8}) {
      const auto fit = measure_tone(c, frac * lower_nyq, 40000);
      EXPECT_LE(std::abs(20.0 * std::log10(fit.amplitude)), 0.01) << out_rate << " f " << frac;
      EXPECT_NEAR(std::remainder(fit.phase - 0.3, 2.0 * pi), 0.0, 1e-4) << out_rate << " f " << frac;
      EXPECT_LE(20.0 * std::log10(fit.residual_rms / fit.amplitude), -80.0) << out_rate << " f " << frac;
    }
  }
}

// SIMD kernels equal the scalar reference (kernel_equality.hpp) on random input and on a
// Lorentzian readback, on both paths, decimating and interpolating.
TEST(Resampler, SimdKernelsMatchTheScalarReference) {
  ReadbackSpec s;
  s.bit_rate_hz = 100e6;
  s.sample_rate_hz = 250e6;
  const auto readback = lorentzian_readback(random_nrz(8000, 14), s, 20000);
  const auto random = noise(20000, 15);
  for (double out_rate : {200e6, 200e6 * 1.001371, 500e6, 611e6, 100e6 * 1.011}) {
    auto c = config(250e6, out_rate);
    c.first_output_position = 0.625;
    const std::string what = "out " + std::to_string(out_rate);
    EXPECT_GE(expect_kernels_match_reference(c, random, "random, " + what), 1u);
    EXPECT_GE(expect_kernels_match_reference(c, readback, "readback, " + what), 1u);
  }
}

// The filter design's SIMD series (the Kaiser window's I0) uses the same operations in the
// same order on every target, so the designed table, seen through its response, is
// identical whichever target built it.
TEST(Resampler, DesignIsIdenticalOnEveryTarget) {
  const auto c = config(250e6, 200e6 * 1.001371);
  const Resampler reference(c);
  for (const int64_t target : hwy::SupportedAndGeneratedTargets()) {
    hwy::SetSupportedTargetsForTest(target);
    const Resampler r(c);
    hwy::SetSupportedTargetsForTest(0);
    for (double mu : {0.0, 0.1234, 0.5, 0.987})
      for (double f : {0.0, 0.1, 0.31, 0.45})
        EXPECT_EQ(r.response(f, mu), reference.response(f, mu)) << hwy::TargetName(target) << " mu " << mu << " f " << f;
  }
}

// Stopband on the exact path (same bound and tones as the interpolated path's test):
// 2.5 -> 2 samples per bit (5/4) and a 5/2 decimation.
TEST(Resampler, StopbandOnTheExactPathAtLeast80dB) {
  for (double out_rate : {200e6, 100e6}) {
    const auto c = config(250e6, out_rate);
    Resampler r(c);
    ASSERT_GT(r.spec().exact_phases, 0);
    const double out_nyq_in_cycles = 0.5 / r.ratio();
    for (double frac : {1.0, 1.02, 1.1, 1.3, 1.6, 2.0, 2.4}) {
      const double f = frac * out_nyq_in_cycles;
      if (f >= 0.499) continue;
      const auto x = tone(60000, f, 1.0, 0.1);
      const auto y = run_whole(c, x);
      const size_t skip = static_cast<size_t>(2 * r.half_taps() / r.ratio()) + 4;
      const double level = rms(std::span<const float>(y).subspan(skip, y.size() - 2 * skip)) / rms(x);
      EXPECT_LE(20.0 * std::log10(level), -80.0) << "out " << out_rate << " tone at " << frac << " x new Nyquist";
    }
  }
}
