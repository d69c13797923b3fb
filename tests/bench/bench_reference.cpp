// Side by side: each salvor kernel against the same job done by a general-purpose library
// from Debian's packages, measured in one process, alternating salvor / reference for
// several rounds. The ratio printed is the median of the per-round ratios (salvor rate /
// reference rate, higher is better), so a burst of load from another process spoils one
// round, not the figure. Driven by tools/bench; not part of ctest.
//
//   bench_reference [--quick] [--rounds N] [--min-time SECONDS]
//
// Output: one Markdown table row per kernel (kernel, salvor, reference, ratio, target,
// met), then "- " note lines (what each side was configured as). Every pair is checked
// before it is timed (same CRC values, both RS decoders correct every codeword, both
// Viterbi decoders recover their data, ...); a failed check aborts with exit 1.

extern "C" {
#include <fec.h>  // no C++ guard of its own
}
#include <soxr.h>
#include <volk/volk.h>
#include <zlib.h>

#include <complex>  // liquid.h uses std::complex in C++
#include <liquid/liquid.h>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <functional>
#include <random>
#include <span>
#include <string>
#include <vector>

#include "bench_signal.hpp"
#include "equalize/equalizer.hpp"
#include "format/crc.hpp"
#include "format/reed_solomon.hpp"
#include "resample/resampler.hpp"
#include "timing/timing_loop.hpp"
#include "trellis/maxlogmap.hpp"
#include "trellis/sequence_detector.hpp"

// libfec's tables for its fixed CCSDS code (exported by libfec.so, not declared in fec.h):
// read here only to check the field polynomial the library really uses.
extern "C" unsigned char CCSDS_alpha_to[];

namespace {

[[noreturn]] void fail(const std::string& what) {
  std::fprintf(stderr, "bench_reference: check failed: %s\n", what.c_str());
  std::exit(1);
}

template <class T>
inline void keep(const T& value) {
  asm volatile("" : : "g"(&value) : "memory");
}

double median(std::vector<double> v) {
  std::sort(v.begin(), v.end());
  const size_t n = v.size();
  return n % 2 ? v[n / 2] : 0.5 * (v[n / 2 - 1] + v[n / 2]);
}

// ---------------------------------------------------------------------------------------
// Measurement: a "run" processes one whole input and returns how many items it handled.

struct Options {
  int rounds = 9;
  double min_time = 0.2;  // seconds per side per round
};

using RunFn = std::function<double()>;

double rate_of(const RunFn& run, double min_time) {
  using clock = std::chrono::steady_clock;
  double items = 0;
  const auto t0 = clock::now();
  double elapsed = 0;
  do {
    items += run();
    elapsed = std::chrono::duration<double>(clock::now() - t0).count();
  } while (elapsed < min_time);
  return items / elapsed;
}

struct PairResult {
  double salvor = 0, reference = 0, ratio = 0;
};

PairResult measure(const RunFn& salvor, const RunFn& reference, const Options& o) {
  salvor();  // warm caches and lazy initialisation on both sides before timing
  reference();
  std::vector<double> a, b, r;
  for (int i = 0; i < o.rounds; ++i) {
    const double ra = rate_of(salvor, o.min_time);
    const double rb = rate_of(reference, o.min_time);
    a.push_back(ra);
    b.push_back(rb);
    r.push_back(ra / rb);
  }
  return {median(a), median(b), median(r)};
}

std::string si(double v, const char* unit) {
  const char* prefix = "";
  if (v >= 1e9) { v /= 1e9; prefix = "G"; }
  else if (v >= 1e6) { v /= 1e6; prefix = "M"; }
  else if (v >= 1e3) { v /= 1e3; prefix = "k"; }
  char buf[64];
  std::snprintf(buf, sizeof buf, "%.3g %s%s", v, prefix, unit);
  return buf;
}

void row(const std::string& kernel, const PairResult& p, const char* unit, double target,
         const std::string& target_text) {
  char ratio[32];
  std::snprintf(ratio, sizeof ratio, "%.2fx", p.ratio);
  std::string met = "-";
  if (target > 0) {
    if (p.ratio >= target) {
      met = "yes";
    } else {
      char buf[48];
      std::snprintf(buf, sizeof buf, "no (%.0f%% of target)", 100.0 * p.ratio / target);
      met = buf;
    }
  }
  std::printf("| %s | %s | %s | %s | %s | %s |\n", kernel.c_str(), si(p.salvor, unit).c_str(),
              si(p.reference, unit).c_str(), ratio, target_text.c_str(), met.c_str());
  std::fflush(stdout);
}

std::vector<std::string> notes;
void note(const std::string& s) { notes.push_back(s); }

// ---------------------------------------------------------------------------------------
// Inputs

constexpr size_t kBlock = 4096;  // streaming block, input samples

// ---------------------------------------------------------------------------------------
// Resampler vs libsoxr HQ

size_t salvor_resample(const salvor::ResamplerConfig& cfg, std::span<const float> x,
                       std::vector<float>& out) {
  salvor::Resampler r(cfg);
  size_t produced = 0;
  for (size_t off = 0; off < x.size();) {
    const size_t n = std::min(kBlock, x.size() - off);
    auto p = r.process(x.subspan(off, n), std::span<float>(out).subspan(produced));
    off += p.consumed;
    produced += p.produced;
    if (p.consumed == 0 && p.produced == 0) fail("salvor resampler made no progress");
  }
  while (size_t got = r.flush(std::span<float>(out).subspan(produced)).produced) produced += got;
  return produced;
}

size_t soxr_resample(double in_rate, double out_rate, std::span<const float> x,
                     std::vector<float>& out) {
  soxr_error_t err = nullptr;
  const soxr_io_spec_t io = soxr_io_spec(SOXR_FLOAT32_I, SOXR_FLOAT32_I);
  const soxr_quality_spec_t q = soxr_quality_spec(SOXR_HQ, 0);
  soxr_t s = soxr_create(in_rate, out_rate, 1, &err, &io, &q, nullptr);
  if (!s || err) fail(std::string("soxr_create: ") + (err ? err : "null"));
  size_t produced = 0;
  for (size_t off = 0; off <= x.size();) {
    const bool last = off == x.size();
    const size_t n = last ? 0 : std::min(kBlock, x.size() - off);
    size_t idone = 0, odone = 0;
    err = soxr_process(s, last ? nullptr : x.data() + off, n, &idone,
                       out.data() + produced, out.size() - produced, &odone);
    if (err) fail(std::string("soxr_process: ") + err);
    off += idone;
    produced += odone;
    if (last && odone == 0) break;
    if (!last && idone == 0 && odone == 0) fail("soxr made no progress");
  }
  soxr_delete(s);
  return produced;
}

// Alias of a tone above the output Nyquist: input tone at 1.1x the output Nyquist, output
// rms relative to the input rms, in dB (steady state only: 20 % trimmed at both ends).
double alias_db(std::span<const float> y) {
  const size_t a = y.size() / 5, b = y.size() - y.size() / 5;
  double s = 0;
  for (size_t i = a; i < b; ++i) s += static_cast<double>(y[i]) * y[i];
  const double rms = std::sqrt(s / static_cast<double>(b - a));
  return 20.0 * std::log10(std::max(rms, 1e-20) / std::sqrt(0.5));
}

void bench_resampler(const Options& o) {
  const double in_rate = 250e6;
  const std::vector<float> x = salvor::bench::readback(1 << 20, 2.5, 1);
  std::vector<float> out(x.size() + 65536);

  // The tone check: 1.1x output Nyquist lies beyond both filters' stopband edge.
  const soxr_quality_spec_t hq = soxr_quality_spec(SOXR_HQ, 0);
  const double soxr_db = hq.precision * 20.0 * std::log10(2.0);
  struct Case {
    std::string name;
    double out_rate;
    double attenuation;
  };
  // 2.5 -> 2 samples per bit is ratio 1.25 exactly; the second ratio is that times a
  // 123 ppm spindle offset (1.25 * 1.000123 is not a ratio of small integers).
  const std::vector<Case> cases = {
      {"resample 2.5->2 spb (ratio 1.25), salvor 90 dB", 200e6, 90.0},
      {"resample ratio 1.25*1.000123 (non-rational), salvor 90 dB", 200e6 / 1.000123, 90.0},
      {"resample 2.5->2 spb (ratio 1.25), salvor at soxr HQ's attenuation", 200e6, soxr_db},
  };
  for (const auto& c : cases) {
    salvor::ResamplerConfig cfg;
    cfg.input_rate_hz = in_rate;
    cfg.output_rate_hz = c.out_rate;
    cfg.stopband_attenuation_db = c.attenuation;

    const size_t ns = salvor_resample(cfg, x, out);
    const size_t nr = soxr_resample(in_rate, c.out_rate, x, out);
    const double expect = x.size() * c.out_rate / in_rate;
    if (std::abs(static_cast<double>(ns) - expect) > 2 || std::abs(static_cast<double>(nr) - expect) > 2)
      fail("resampler output counts " + std::to_string(ns) + " / " + std::to_string(nr) +
           ", expected about " + std::to_string(expect));

    std::vector<float> tone(1 << 18);
    const double f = 1.1 * 0.5 * c.out_rate / in_rate;  // cycles per input sample
    for (size_t i = 0; i < tone.size(); ++i) tone[i] = static_cast<float>(std::sin(2 * M_PI * f * i));
    std::vector<float> ty(tone.size() + 65536);
    const double a_s = alias_db(std::span<const float>(ty).first(salvor_resample(cfg, tone, ty)));
    const double a_r = alias_db(std::span<const float>(ty).first(soxr_resample(in_rate, c.out_rate, tone, ty)));

    auto p = measure([&] { salvor_resample(cfg, x, out); return static_cast<double>(x.size()); },
                     [&] { soxr_resample(in_rate, c.out_rate, x, out); return static_cast<double>(x.size()); },
                     o);
    row(c.name, p, "S/s", 1.0, ">= 1.0x soxr HQ");
    char buf[1024];
    std::snprintf(buf, sizeof buf,
                  "%s: salvor Kaiser design stopband_attenuation_db = %.1f, passband 0.80 / stopband "
                  "1.00 of the output Nyquist; soxr HQ = %.0f-bit precision (%.1f dB), passband end "
                  "%.3f, stopband begin %.2f. Measured alias of a tone at 1.1x output Nyquist: "
                  "salvor %.1f dB, soxr %.1f dB. Input samples/s, blocks of %zu, float32.",
                  c.name.c_str(), c.attenuation, hq.precision, soxr_db, hq.passband_end,
                  hq.stopband_begin, a_s, a_r, kBlock);
    note(buf);
  }
}

// ---------------------------------------------------------------------------------------
// Timing recovery vs liquid symsync_rrrf

void bench_timing(const Options& o) {
  const std::vector<float> x = salvor::bench::readback(1 << 20, 2.0, 2);
  std::vector<salvor::timing::BitSample> bits(kBlock);
  salvor::timing::TimingLoopConfig tc;
  tc.samples_per_bit = 2.0;
  tc.pw50_bits = 2.3;
  tc.midpoints = false;  // one sample per bit out, as symsync gives (the decoder runs it so too)
  uint64_t locked = 0, salvor_bits = 0;
  auto run_salvor = [&] {
    salvor::timing::TimingLoop pll(tc);
    for (size_t off = 0; off < x.size();) {
      auto p = pll.process(std::span<const float>(x).subspan(off, std::min(kBlock, x.size() - off)), bits);
      off += p.consumed;
      if (p.consumed == 0 && p.produced == 0) fail("timing loop made no progress");
    }
    locked = pll.stats().locked_bits;
    salvor_bits = pll.stats().bits;
    return static_cast<double>(x.size());
  };
  std::vector<float> y(kBlock + 64);
  size_t liquid_bits = 0;
  auto run_liquid = [&] {
    symsync_rrrf q = symsync_rrrf_create_kaiser(2, 3, 0.5f, 32);
    symsync_rrrf_set_lf_bw(q, 0.02f);
    liquid_bits = 0;
    for (size_t off = 0; off < x.size(); off += kBlock) {
      const unsigned n = static_cast<unsigned>(std::min(kBlock, x.size() - off));
      unsigned ny = 0;
      symsync_rrrf_execute(q, const_cast<float*>(x.data() + off), n, y.data(), &ny);
      liquid_bits += ny;
    }
    symsync_rrrf_destroy(q);
    return static_cast<double>(x.size());
  };
  run_salvor();
  run_liquid();
  const double expect = x.size() / 2.0;
  if (std::abs(salvor_bits - expect) > 0.01 * expect || std::abs(liquid_bits - expect) > 0.01 * expect)
    fail("timing recovery: bits out " + std::to_string(salvor_bits) + " / " + std::to_string(liquid_bits));
  if (locked < salvor_bits / 2) fail("salvor timing loop did not lock on the bench input");
  auto p = measure(run_salvor, run_liquid, o);
  row("timing recovery (2 spb in, 1 sample/bit out)", p, "S/s", 2.0, ">= 2x symsync");
  char buf[1024];
  std::snprintf(buf, sizeof buf,
                "timing recovery: salvor TimingLoop (PLL, cubic Farrow, M&M detector, EPR4 prefilter; "
                "locked on %.0f%% of bits) vs liquid symsync_rrrf_create_kaiser(k=2, m=3, beta=0.5, "
                "32 filters), loop bw 0.02; input samples/s on the same 2 spb Lorentzian readback.",
                100.0 * locked / std::max<uint64_t>(1, salvor_bits));
  note(buf);
}

// ---------------------------------------------------------------------------------------
// FIR (adaptation off) and LMS (adapting every sample), 15 taps, vs liquid

struct BitSpaced {
  std::vector<float> y;
  std::vector<int8_t> level;   // written levels +-1
  std::vector<float> desired;  // PR4 target output (1 - D^2) a, aligned with y
};

BitSpaced bit_spaced(size_t n, uint32_t seed) {
  std::mt19937 rng(seed);
  std::normal_distribution<double> noise(0.0, 0.1);
  BitSpaced b;
  b.level.resize(n);
  for (auto& l : b.level) l = (rng() & 1) ? 1 : -1;
  b.y.resize(n);
  b.desired.resize(n);
  // A channel with more ISI than PR4, so the equalizer has something to do.
  const double h[] = {0.3, 1.0, 0.4, -0.6, -0.5, -0.1};
  for (size_t k = 0; k < n; ++k) {
    double v = 0;
    for (size_t m = 0; m < 6; ++m)
      if (k >= m) v += h[m] * b.level[k - m];
    b.y[k] = static_cast<float>(v + noise(rng));
    b.desired[k] = static_cast<float>(b.level[k] - (k >= 2 ? b.level[k - 2] : 0));
  }
  return b;
}

void bench_fir_lms(const Options& o) {
  constexpr size_t kTaps = 15, kDelay = 7;
  const BitSpaced in = bit_spaced(1 << 18, 3);
  std::vector<float> out(in.y.size() + 64);

  salvor::equalize::EqualizerConfig ec;
  ec.taps = kTaps;
  ec.delay = kDelay;
  std::vector<float> h(kTaps);
  for (size_t i = 0; i < kTaps; ++i) h[i] = 0.05f * std::cos(0.7f * i);
  h[kDelay] = 1.0f;
  ec.initial_taps.assign(h.begin(), h.end());

  // Plain FIR.
  {
    auto run_salvor = [&] {
      salvor::equalize::Equalizer eq(ec);
      size_t produced = 0;
      for (size_t off = 0; off < in.y.size(); off += kBlock) {
        const size_t n = std::min(kBlock, in.y.size() - off);
        produced += eq.process(std::span<const float>(in.y).subspan(off, n),
                               std::span<float>(out).subspan(produced)).produced;
      }
      keep(produced);
      return static_cast<double>(in.y.size());
    };
    auto run_liquid = [&] {
      firfilt_rrrf q = firfilt_rrrf_create(h.data(), kTaps);
      for (size_t off = 0; off < in.y.size(); off += kBlock) {
        const unsigned n = static_cast<unsigned>(std::min(kBlock, in.y.size() - off));
        firfilt_rrrf_execute_block(q, const_cast<float*>(in.y.data() + off), n, out.data() + off);
      }
      firfilt_rrrf_destroy(q);
      return static_cast<double>(in.y.size());
    };
    // Same filter: liquid's output n is sum_i h[i] x[n-i]; salvor's output j (held back by
    // `delay`) is sum_i w_i x[j+delay-i], i.e. liquid's output j + delay.
    run_liquid();
    std::vector<float> ref(out.begin(), out.begin() + static_cast<long>(in.y.size()));
    run_salvor();
    for (size_t j = 0; j + kDelay < in.y.size(); j += 997)
      if (std::abs(out[j] - ref[j + kDelay]) > 1e-4f * (1 + std::abs(ref[j + kDelay])))
        fail("FIR outputs differ at " + std::to_string(j));
    auto p = measure(run_salvor, run_liquid, o);
    row("FIR 15 taps, adaptation off", p, "S/s", 0, "-");
  }

  // LMS, adapting on every sample with known levels.
  {
    double salvor_mse = 0, liquid_mse = 0;
    auto run_salvor = [&] {
      salvor::equalize::Equalizer eq(ec);
      size_t produced = 0;
      for (size_t off = 0; off < in.y.size(); off += kBlock) {
        const size_t n = std::min(kBlock, in.y.size() - off);
        produced += eq.train(std::span<const float>(in.y).subspan(off, n),
                             std::span<const int8_t>(in.level).subspan(off, n),
                             std::span<float>(out).subspan(produced)).produced;
      }
      salvor_mse = eq.running_mse();
      return static_cast<double>(in.y.size());
    };
    auto run_liquid = [&] {
      eqlms_rrrf q = eqlms_rrrf_create(h.data(), kTaps);
      eqlms_rrrf_set_bw(q, 0.01f);
      double e2 = 0;
      // liquid's output n uses x[n-14..n]; its desired value is the target at n - delay.
      for (size_t n = 0; n < in.y.size(); ++n) {
        // liquid.h's DEPRECATED() wrapper of get_weights also marks the next declaration
        // (push) deprecated; push is the documented call, so silence that warning here.
#pragma GCC diagnostic push
#pragma GCC diagnostic ignored "-Wdeprecated-declarations"
        eqlms_rrrf_push(q, in.y[n]);
#pragma GCC diagnostic pop
        float yhat = 0;
        eqlms_rrrf_execute(q, &yhat);
        const float d = n >= kDelay ? in.desired[n - kDelay] : 0.0f;
        eqlms_rrrf_step(q, d, yhat);
        if (n + 1000 >= in.y.size()) e2 += (d - yhat) * (d - yhat);
      }
      liquid_mse = e2 / 1000;
      eqlms_rrrf_destroy(q);
      return static_cast<double>(in.y.size());
    };
    run_salvor();
    run_liquid();
    // Both must have learned the channel: the PR4 target has power 2, an unadapted
    // equalizer leaves an error near that (common practice, no source: a tenth of it).
    if (!(salvor_mse < 0.2) || !(liquid_mse < 0.2))
      fail("LMS did not converge: salvor mse " + std::to_string(salvor_mse) + ", liquid " +
           std::to_string(liquid_mse));
    auto p = measure(run_salvor, run_liquid, o);
    row("LMS equalizer 15 taps, adapting every sample", p, "S/s", 3.0, ">= 3x eqlms");
    char buf[1024];
    std::snprintf(buf, sizeof buf,
                  "LMS: salvor Equalizer::train (NLMS, step 0.01, PR4 target, known levels) vs liquid "
                  "eqlms_rrrf push/execute/step per sample (bw 0.01); final mse salvor %.4f, liquid %.4f. "
                  "FIR: Equalizer::process vs firfilt_rrrf_execute_block, outputs checked equal.",
                  salvor_mse, liquid_mse);
    note(buf);
  }
}

// ---------------------------------------------------------------------------------------
// Viterbi: salvor E2PR4 (16 states) vs VOLK K=7 r=1/2 (64 states); max-log-MAP vs Viterbi

std::vector<float> pr_samples(const std::vector<double>& f, const std::vector<uint8_t>& nrzi, double sigma,
                              std::mt19937_64& rng) {
  std::normal_distribution<double> noise(0.0, sigma);
  std::vector<int> lv(nrzi.size());
  int l = -1;
  for (size_t k = 0; k < nrzi.size(); ++k) lv[k] = l = nrzi[k] ? -l : l;
  std::vector<float> y(nrzi.size());
  for (size_t k = 0; k < nrzi.size(); ++k) {
    double v = 0;
    for (size_t m = 0; m < f.size(); ++m) v += f[m] * (k >= m ? lv[k - m] : -1);
    y[k] = static_cast<float>(v + noise(rng));
  }
  return y;
}

int parity8(unsigned x) { return __builtin_parity(x); }

void bench_viterbi(const Options& o) {
  constexpr size_t kBits = 1 << 16;
  const std::vector<double> e2pr4{1, 2, 0, -2, -1};
  std::mt19937_64 rng(77);
  std::vector<uint8_t> truth(kBits);
  for (auto& b : truth) b = rng() & 1;
  const std::vector<float> y = pr_samples(e2pr4, truth, 0.3, rng);
  std::vector<uint8_t> bits(kBits + 1024);
  std::vector<float> llr(bits.size());

  salvor::trellis::SequenceDetectorConfig vc;
  vc.reliability = false;
  vc.noise_sigma = 0.3;
  salvor::trellis::SequenceDetector vit(e2pr4, vc);
  auto run_vit = [&] {
    vit.reset();
    auto p = vit.process(y, {}, bits, llr);
    size_t n = p.produced + vit.flush(std::span<uint8_t>(bits).subspan(p.produced),
                                      std::span<float>(llr).subspan(p.produced));
    if (n != kBits) fail("salvor Viterbi released " + std::to_string(n) + " bits");
    return static_cast<double>(kBits) * vit.trellis().states();
  };
  salvor::trellis::MaxLogMapConfig mc;
  mc.noise_sigma = 0.3;
  salvor::trellis::MaxLogMap map(e2pr4, mc);
  auto run_map = [&] {
    map.reset();
    auto p = map.process(y, {}, bits, llr);
    size_t n = p.produced + map.flush(std::span<uint8_t>(bits).subspan(p.produced),
                                      std::span<float>(llr).subspan(p.produced));
    if (n != kBits) fail("salvor max-log-MAP released " + std::to_string(n) + " bits");
    return static_cast<double>(kBits) * map.trellis().states();
  };
  auto errors_vs_truth = [&] {
    size_t e = 0;
    for (size_t k = 8; k < kBits; ++k) e += bits[k] != truth[k];
    return e;
  };
  run_vit();
  const size_t vit_errors = errors_vs_truth();
  run_map();
  const size_t map_errors = errors_vs_truth();
  // sigma 0.3 on E2PR4 (d2min 6 in level units: 4 d2min = 24 in output units) gives a
  // raw error rate far below 1e-3 (union bound; common practice, no source for the margin).
  if (vit_errors > kBits / 1000 || map_errors > kBits / 1000)
    fail("salvor detectors' bit errors " + std::to_string(vit_errors) + " / " + std::to_string(map_errors));

  // VOLK: rate 1/2, K = 7, polynomials 0x6d, 0x4f; decisions one bit per state per step.
  constexpr int kStates = 64, kTail = 6;
  const int polys[2] = {0x6d, 0x4f};
  alignas(32) unsigned char branchtab[kStates];
  for (int s = 0; s < kStates / 2; ++s)
    for (int i = 0; i < 2; ++i) branchtab[i * kStates / 2 + s] = parity8((2 * s) & polys[i]) ? 255 : 0;
  const size_t steps = kBits + kTail;
  std::vector<uint8_t> data(steps, 0);
  for (size_t k = 0; k < kBits; ++k) data[k] = rng() & 1;
  std::vector<unsigned char> syms(2 * steps);
  {
    std::normal_distribution<double> noise(0.0, 40.0);
    unsigned reg = 0;
    for (size_t k = 0; k < steps; ++k) {
      reg = ((reg << 1) | data[k]) & 0x7f;
      for (int i = 0; i < 2; ++i) {
        const double v = (parity8(reg & polys[i]) ? 255.0 : 0.0) + noise(rng);
        syms[2 * k + i] = static_cast<unsigned char>(std::clamp(std::lround(v), 0L, 255L));
      }
    }
  }
  const size_t align = volk_get_alignment();
  auto* metric_x = static_cast<unsigned char*>(volk_malloc(kStates, align));
  auto* metric_y = static_cast<unsigned char*>(volk_malloc(kStates, align));
  auto* dec = static_cast<unsigned char*>(volk_malloc(steps * kStates / 8, align));
  std::vector<uint8_t> decoded(steps);
  auto run_volk = [&] {
    std::memset(metric_x, 63, kStates);
    metric_x[0] = 0;  // the encoder starts in state 0
    std::memset(dec, 0, steps * kStates / 8);  // the generic kernel ORs decisions in
    volk_8u_x4_conv_k7_r2_8u(metric_y, metric_x, syms.data(), dec, static_cast<unsigned>(steps), 0, branchtab);
    // Chainback from state 0 (the tail flushes the encoder): the decision bit of state s
    // at step k is the oldest register bit of its predecessor; the data bit is s's LSB.
    unsigned s = 0;
    for (size_t k = steps; k-- > 0;) {
      const uint64_t* w = reinterpret_cast<const uint64_t*>(dec + k * kStates / 8);
      const unsigned d = (*w >> s) & 1u;
      decoded[k] = s & 1u;
      s = (s >> 1) | (d << 5);
    }
    return static_cast<double>(kBits) * kStates;
  };
  run_volk();
  size_t volk_errors = 0;
  for (size_t k = 0; k < kBits; ++k) volk_errors += decoded[k] != data[k];
  if (volk_errors > kBits / 1000) fail("VOLK decoder bit errors " + std::to_string(volk_errors));

  auto p = measure(run_vit, run_volk, o);
  row("Viterbi: salvor E2PR4 16 states vs VOLK K=7 64 states", p, "state-updates/s", 0.6, ">= 0.6x VOLK");
  auto q = measure(run_map, run_vit, o);
  row("max-log-MAP vs salvor Viterbi, E2PR4 16 states", q, "state-updates/s", 1.0 / 3.0, ">= 1/3 Viterbi");
  char buf[1024];
  std::snprintf(buf, sizeof buf,
                "Viterbi: salvor SequenceDetector (euclidean, reliability off, traceback 64) on %zu bits "
                "of E2PR4 + noise sigma 0.3 (%zu bit errors); VOLK volk_8u_x4_conv_k7_r2_8u (dispatched, "
                "VOLK machine %s) "
                "plus a bit-per-step chainback (decision memset included) on %zu bits, 8-bit soft "
                "symbols (%zu bit errors). Figures are states x bits / s (bits/s = figure / 16 resp. / 64). "
                "max-log-MAP: block 256, overlap 64 (%zu bit errors).",
                kBits, vit_errors, volk_get_machine(), kBits, volk_errors, map_errors);
  note(buf);
  volk_free(metric_x);
  volk_free(metric_y);
  volk_free(dec);
}

// ---------------------------------------------------------------------------------------
// Reed-Solomon: libfec's CCSDS (255,223) code, 8 symbol errors per codeword

void bench_rs(const Options& o) {
  // The code behind decode_rs_8: fec.h calls it the CCSDS (255,223) code in conventional
  // basis. The field polynomial is read from libfec's own table (alpha^8 = poly mod x^8);
  // fcr 112 and prim 11 are the CCSDS values, checked below by requiring salvor's encoder
  // with them to give libfec's parity on random messages.
  const unsigned gfpoly = 0x100u | CCSDS_alpha_to[8];
  salvor::format::ReedSolomonConfig rc;
  rc.field_polynomial = gfpoly;
  rc.first_root = 112;
  rc.primitive_element = 11;
  rc.parity_symbols = 32;
  rc.length = 255;
  const salvor::format::ReedSolomon rs(rc);
  constexpr int kN = 255, kK = 223, kErrors = 8, kWords = 256;

  std::mt19937_64 rng(11);
  std::vector<uint8_t> clean(static_cast<size_t>(kN) * kWords), corrupted;
  for (int w = 0; w < kWords; ++w) {
    uint8_t* cw = clean.data() + static_cast<size_t>(w) * kN;
    for (int i = 0; i < kK; ++i) cw[i] = rng() & 0xff;
    std::vector<uint8_t> salvor_parity(32);
    rs.encode(std::span<const uint8_t>(cw, kK), salvor_parity);
    encode_rs_8(cw, cw + kK, 0);
    if (!std::equal(salvor_parity.begin(), salvor_parity.end(), cw + kK))
      fail("salvor RS(0x" + std::to_string(gfpoly) + ", fcr 112, prim 11) parity differs from encode_rs_8");
  }
  corrupted = clean;
  for (int w = 0; w < kWords; ++w) {
    std::vector<int> pos(kN);
    for (int i = 0; i < kN; ++i) pos[i] = i;
    std::shuffle(pos.begin(), pos.end(), rng);
    for (int e = 0; e < kErrors; ++e)
      corrupted[static_cast<size_t>(w) * kN + pos[e]] ^= static_cast<uint8_t>(1 + rng() % 255);
  }
  std::vector<uint8_t> work(corrupted.size());
  int salvor_fixed = 0, fec_fixed = 0;
  auto run_salvor = [&] {
    std::memcpy(work.data(), corrupted.data(), work.size());
    salvor_fixed = 0;
    for (int w = 0; w < kWords; ++w) {
      auto r = rs.decode(std::span<uint8_t>(work.data() + static_cast<size_t>(w) * kN, kN));
      salvor_fixed += r.ok ? r.corrected : -1000;
    }
    return static_cast<double>(kWords);
  };
  auto run_fec = [&] {
    std::memcpy(work.data(), corrupted.data(), work.size());
    fec_fixed = 0;
    for (int w = 0; w < kWords; ++w) {
      const int r = decode_rs_8(work.data() + static_cast<size_t>(w) * kN, nullptr, 0, 0);
      fec_fixed += r >= 0 ? r : -1000;
    }
    return static_cast<double>(kWords);
  };
  run_salvor();
  if (salvor_fixed != kWords * kErrors || work != clean) fail("salvor RS did not correct every codeword");
  run_fec();
  if (fec_fixed != kWords * kErrors || work != clean) fail("libfec decode_rs_8 did not correct every codeword");
  auto p = measure(run_salvor, run_fec, o);
  row("Reed-Solomon (255,223), 8 symbol errors/codeword", p, "codewords/s", 1.0, ">= 1.0x libfec");
  char buf[1024];
  std::snprintf(buf, sizeof buf,
                "Reed-Solomon: salvor ReedSolomon(gfpoly 0x%X from libfec's alpha table, fcr 112, prim 11, "
                "32 parity) gives encode_rs_8's parity; %d codewords, 8 random symbol errors each, both "
                "decoders checked to restore every codeword (memcpy of the corrupted set timed on both sides).",
                gfpoly, kWords);
  note(buf);
}

// ---------------------------------------------------------------------------------------
// CRC-32 vs zlib

void bench_crc(const Options& o) {
  std::mt19937_64 rng(5);
  std::vector<uint8_t> buf(1 << 20);
  for (auto& b : buf) b = rng() & 0xff;
  const salvor::format::Crc crc(salvor::format::crc32_iso_hdlc());
  // Sector-sized pieces as well as the whole buffer, so both short and long runs agree.
  for (size_t len : {size_t{1}, size_t{512}, size_t{4096}, buf.size()}) {
    const uint32_t a = crc.compute(std::span<const uint8_t>(buf).first(len));
    const uint32_t b = static_cast<uint32_t>(crc32(0L, buf.data(), static_cast<uInt>(len)));
    if (a != b) fail("CRC-32 differs from zlib for " + std::to_string(len) + " bytes");
  }
  uint32_t sink = 0;
  auto p = measure(
      [&] { sink ^= crc.compute(buf); return static_cast<double>(buf.size()); },
      [&] { sink ^= static_cast<uint32_t>(crc32(0L, buf.data(), static_cast<uInt>(buf.size()))); return static_cast<double>(buf.size()); },
      o);
  keep(sink);
  row("CRC-32 (ISO-HDLC), 1 MiB buffers", p, "B/s", 0, "-");
  note("CRC-32: salvor Crc(crc32_iso_hdlc()) vs zlib crc32 on the same 1 MiB buffer; values checked equal.");
}

}  // namespace

int main(int argc, char** argv) {
  Options o;
  for (int i = 1; i < argc; ++i) {
    const std::string a = argv[i];
    if (a == "--quick") {
      o.rounds = 3;
      o.min_time = 0.05;
    } else if (a == "--rounds" && i + 1 < argc) {
      o.rounds = std::max(1, std::atoi(argv[++i]));
    } else if (a == "--min-time" && i + 1 < argc) {
      o.min_time = std::atof(argv[++i]);
    } else {
      std::fprintf(stderr, "usage: bench_reference [--quick] [--rounds N] [--min-time SECONDS]\n");
      return 2;
    }
  }
  std::printf("| kernel | salvor | reference | ratio | target | met |\n|---|---|---|---|---|---|\n");
  bench_resampler(o);
  bench_timing(o);
  bench_fir_lms(o);
  bench_viterbi(o);
  bench_rs(o);
  bench_crc(o);
  std::printf("\n%d rounds per pair, >= %.2f s per side per round, salvor first in each round; every "
              "run builds its objects (both sides) and streams the whole input, one core.\n\n",
              o.rounds, o.min_time);
  for (const auto& n : notes) std::printf("- %s\n", n.c_str());
  return 0;
}
