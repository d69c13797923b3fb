// Samples (or bits) per second on one core for each front-end stage and each detector
// plugin. Run: build/bin/bench_stages [--benchmark_filter=...]. Not part of ctest.

#include <benchmark/benchmark.h>
#include <sndfile.h>

#include <cmath>
#include <filesystem>
#include <random>
#include <vector>

#include "bench_signal.hpp"
#include "condition/conditioner.hpp"
#include "detect/detector.hpp"
#include "detect/plugin_host.hpp"
#include "load/capture_reader.hpp"
#include "resample/resampler.hpp"
#include "timing/timing_loop.hpp"

namespace {

const std::vector<float>& capture_samples() {
  static const std::vector<float> x = salvor::bench::readback(1 << 20, 2.5, 1);
  return x;
}

void BM_LoadWavInt16(benchmark::State& st) {
  namespace fs = std::filesystem;
  static fs::path path = [] {
    fs::path p = fs::temp_directory_path() / "salvor-bench-load.wav";
    SF_INFO info{};
    info.samplerate = 250000000;
    info.channels = 1;
    info.format = SF_FORMAT_WAV | SF_FORMAT_PCM_16;
    SNDFILE* f = sf_open(p.c_str(), SFM_WRITE, &info);
    const auto& x = capture_samples();
    std::vector<float> scaled(x.size());
    for (size_t i = 0; i < x.size(); ++i) scaled[i] = x[i] * 0.4f;
    sf_write_float(f, scaled.data(), static_cast<sf_count_t>(scaled.size()));
    sf_close(f);
    return p;
  }();
  std::vector<float> buf(1 << 16);
  size_t total = 0;
  for (auto _ : st) {
    salvor::load::LoadOptions o;
    o.use_sidecar = false;
    auto r = salvor::load::open_capture(path, o);
    while (size_t n = r.read(buf)) total += n;
  }
  st.SetItemsProcessed(static_cast<int64_t>(total));
}
BENCHMARK(BM_LoadWavInt16)->Unit(benchmark::kMillisecond);

void BM_Condition(benchmark::State& st) {
  const auto& x = capture_samples();
  salvor::ConditionerConfig cc;
  cc.sample_rate_hz = 250e6;
  cc.bit_rate_hz = 100e6;
  std::vector<float> out(x.size() + 4096);
  std::vector<uint8_t> flags(out.size());
  for (auto _ : st) {
    salvor::Conditioner c(cc);
    c.process(x, out, flags);
    benchmark::DoNotOptimize(out.data());
  }
  st.SetItemsProcessed(static_cast<int64_t>(st.iterations() * x.size()));
}
BENCHMARK(BM_Condition)->Unit(benchmark::kMillisecond);

// One conditioning stage at a time (argument: 0 clip, 1 thermal asperity, 2 baseline,
// 3 dropout, 4 AGC), to see where the conditioner's time goes.
void BM_ConditionStage(benchmark::State& st) {
  const auto& x = capture_samples();
  salvor::ConditionerConfig cc;
  cc.sample_rate_hz = 250e6;
  cc.bit_rate_hz = 100e6;
  const int stage = static_cast<int>(st.range(0));
  cc.detect_clipping = stage == 0;
  cc.handle_thermal_asperities = stage == 1;
  cc.remove_baseline = stage == 2;
  cc.detect_dropouts = stage == 3;
  cc.normalise_gain = stage == 4;
  std::vector<float> out(x.size() + 4096);
  std::vector<uint8_t> flags(out.size());
  for (auto _ : st) {
    salvor::Conditioner c(cc);
    c.process(x, out, flags);
    benchmark::DoNotOptimize(out.data());
  }
  st.SetItemsProcessed(static_cast<int64_t>(st.iterations() * x.size()));
}
BENCHMARK(BM_ConditionStage)->DenseRange(0, 4)->Unit(benchmark::kMillisecond);

void BM_Resample(benchmark::State& st) {
  const auto& x = capture_samples();
  std::vector<float> out(x.size());
  for (auto _ : st) {
    salvor::Resampler r(salvor::ResamplerConfig::for_bit_rate(250e6, 100e6, 2.0));
    size_t off = 0;
    while (off < x.size()) {
      auto p = r.process(std::span<const float>(x).subspan(off), out);
      off += p.consumed;
      if (p.consumed == 0) break;
    }
    benchmark::DoNotOptimize(out.data());
  }
  st.SetItemsProcessed(static_cast<int64_t>(st.iterations() * x.size()));
}
BENCHMARK(BM_Resample)->Unit(benchmark::kMillisecond);

void BM_Pll(benchmark::State& st) {
  static const std::vector<float> x = salvor::bench::readback(1 << 20, 2.0, 2);
  std::vector<salvor::timing::BitSample> out(x.size());
  for (auto _ : st) {
    salvor::timing::TimingLoopConfig tc;
    tc.samples_per_bit = 2.0;
    tc.pw50_bits = 2.3;
    tc.midpoints = false;  // as the decoder runs it
    salvor::timing::TimingLoop pll(tc);
    size_t off = 0;
    while (off < x.size()) {
      auto p = pll.process(std::span<const float>(x).subspan(off), out);
      off += p.consumed;
      if (p.consumed == 0) break;
    }
    benchmark::DoNotOptimize(out.data());
  }
  st.SetItemsProcessed(static_cast<int64_t>(st.iterations() * x.size()));  // input samples
}
BENCHMARK(BM_Pll)->Unit(benchmark::kMillisecond);

// Every detector plugin through the host, on bit-spaced samples of its target.
const salvor::detect::PluginHost& host() {
  static salvor::detect::PluginHost h({SALVOR_PLUGIN_BUILD_DIR});
  return h;
}

void BM_Detector(benchmark::State& st, std::string name, std::vector<double> target) {
  if (!host().find(name)) {
    st.SkipWithError("plugin not built");
    return;
  }
  std::mt19937 rng(3);
  std::normal_distribution<double> noise(0.0, 0.3);
  const size_t n = 1 << 16;
  std::vector<float> y(n);
  std::vector<int> lv(n + 8, -1);
  for (size_t k = 8; k < lv.size(); ++k) lv[k] = (rng() & 1) ? -lv[k - 1] : lv[k - 1];
  for (size_t k = 0; k < n; ++k) {
    double v = 0;
    if (target.empty()) v = 0.5 * (lv[k + 8] - lv[k + 7]);
    for (size_t m = 0; m < target.size(); ++m) v += target[m] * lv[k + 8 - m];
    y[k] = static_cast<float>(v + noise(rng));
  }
  salvor::detect::DetectorSetup setup;
  setup.target = target;
  setup.noise_sigma = 0.3;
  auto det = host().create(name, setup);
  std::vector<uint8_t> bits(det.capacity_for(n));
  std::vector<float> llr(bits.size());
  for (auto _ : st) {
    det.reset();
    size_t got = det.process(y, {}, bits, llr);
    got += det.flush(std::span<uint8_t>(bits).subspan(got), std::span<float>(llr).subspan(got));
    benchmark::DoNotOptimize(got);
  }
  st.SetItemsProcessed(static_cast<int64_t>(st.iterations() * n));  // bits
  st.counters["states"] = target.size() > 1 ? static_cast<double>(1u << (target.size() - 1)) : 0;
}

const std::vector<double> kPr4{1, 0, -1}, kEpr4{1, 1, -1, -1}, kE2pr4{1, 2, 0, -2, -1},
    kSix{1, 1.5, 0.2, -1.1, -0.5, -0.1};
BENCHMARK_CAPTURE(BM_Detector, peak, std::string("peak"), std::vector<double>{})->Unit(benchmark::kMillisecond);
BENCHMARK_CAPTURE(BM_Detector, template_dicode, std::string("template"), std::vector<double>{1, -1})->Unit(benchmark::kMillisecond);
BENCHMARK_CAPTURE(BM_Detector, dfe_pr4, std::string("dfe"), kPr4)->Unit(benchmark::kMillisecond);
BENCHMARK_CAPTURE(BM_Detector, viterbi_4states, std::string("viterbi"), kPr4)->Unit(benchmark::kMillisecond);
BENCHMARK_CAPTURE(BM_Detector, viterbi_8states, std::string("viterbi"), kEpr4)->Unit(benchmark::kMillisecond);
BENCHMARK_CAPTURE(BM_Detector, viterbi_16states, std::string("viterbi"), kE2pr4)->Unit(benchmark::kMillisecond);
BENCHMARK_CAPTURE(BM_Detector, viterbi_32states, std::string("viterbi"), kSix)->Unit(benchmark::kMillisecond);
BENCHMARK_CAPTURE(BM_Detector, npml_8states, std::string("npml"), kEpr4)->Unit(benchmark::kMillisecond);
BENCHMARK_CAPTURE(BM_Detector, npml_16states, std::string("npml"), kE2pr4)->Unit(benchmark::kMillisecond);
BENCHMARK_CAPTURE(BM_Detector, pdnp_8states, std::string("pdnp"), kEpr4)->Unit(benchmark::kMillisecond);
BENCHMARK_CAPTURE(BM_Detector, pdnp_16states, std::string("pdnp"), kE2pr4)->Unit(benchmark::kMillisecond);
BENCHMARK_CAPTURE(BM_Detector, maxlogmap_8states, std::string("maxlogmap"), kEpr4)->Unit(benchmark::kMillisecond);
BENCHMARK_CAPTURE(BM_Detector, maxlogmap_16states, std::string("maxlogmap"), kE2pr4)->Unit(benchmark::kMillisecond);

}  // namespace

BENCHMARK_MAIN();
