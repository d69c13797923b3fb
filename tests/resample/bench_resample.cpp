// Streaming resampler speed against libsoxr's HQ recipe at the same ratio, in one run
// (Google Benchmark; not part of ctest). Figures are input samples per second on one
// core. Run with --benchmark_repetitions=N --benchmark_enable_random_interleaving=true
// so that salvor and libsoxr alternate on a shared, noisy machine.
//   ratio 1.25        capture at 2.5 samples per bit to 2 (exact polyphase path)
//   ratio 1.25171...  an arbitrary capture rate (interpolated-table path)
#include <benchmark/benchmark.h>
#include <soxr.h>

#include <random>
#include <stdexcept>
#include <vector>

#include "readback_fixture.hpp"
#include "resample/resampler.hpp"

namespace {

constexpr double kInputRate = 250e6;
constexpr double kRatios[] = {1.25, 1.25 * 1.001371};
constexpr size_t kChunk = 1 << 16;

// A Lorentzian readback at 2.5 samples per bit with a little noise: 2^20 samples.
const std::vector<float>& capture() {
  static const std::vector<float> x = [] {
    salvor::testing::ReadbackSpec s;
    s.sample_rate_hz = kInputRate;
    s.bit_rate_hz = kInputRate / 2.5;
    s.truncate_bits = 16;
    const size_t n = size_t{1} << 20;
    auto r = salvor::testing::lorentzian_readback(salvor::testing::random_nrz(n / 2 + 64, 5), s, n);
    std::mt19937 rng(9);
    std::normal_distribution<float> g(0.0f, 0.05f);
    for (auto& v : r) v += g(rng);
    return r;
  }();
  return x;
}

salvor::ResamplerConfig config(double ratio, bool scalar) {
  salvor::ResamplerConfig c;
  c.input_rate_hz = kInputRate;
  c.output_rate_hz = kInputRate / ratio;
  c.scalar_reference = scalar;
  return c;
}

// mode 0: SIMD kernel, 1: scalar reference, 2: SIMD with the flag path (flags mostly zero).
void BM_SalvorResampler(benchmark::State& st) {
  const double ratio = kRatios[st.range(0)];
  const int mode = static_cast<int>(st.range(1));
  const auto& x = capture();
  std::vector<uint8_t> fin(x.size(), 0);
  for (size_t i = 100000; i < x.size(); i += 250000) fin[i] = 1;  // sparse flagged samples
  salvor::Resampler r(config(ratio, mode == 1));
  std::vector<float> out(kChunk);
  std::vector<uint8_t> fout(kChunk);
  for (auto _ : st) {
    size_t off = 0;
    while (off < x.size()) {
      const size_t n = std::min(kChunk, x.size() - off);
      size_t used = 0;
      while (used < n) {
        std::span<const float> in(x.data() + off + used, n - used);
        const auto p = mode == 2 ? r.process(in, std::span<const uint8_t>(fin.data() + off + used, n - used), out, fout)
                                 : r.process(in, out);
        used += p.consumed;
        benchmark::DoNotOptimize(out.data());
      }
      off += n;
    }
  }
  st.SetItemsProcessed(static_cast<int64_t>(st.iterations() * x.size()));
  st.SetLabel(r.spec().exact_phases > 0 ? "exact polyphase" : "interpolated table");
}
BENCHMARK(BM_SalvorResampler)
    ->ArgsProduct({{0, 1}, {0, 1, 2}})
    ->ArgNames({"ratio", "mode"})
    ->Unit(benchmark::kMillisecond);

// libsoxr, SOXR_HQ recipe, float32 in and out, one channel, same chunks.
void BM_SoxrHQ(benchmark::State& st) {
  const double ratio = kRatios[st.range(0)];
  const auto& x = capture();
  soxr_error_t err = nullptr;
  const soxr_io_spec_t io = soxr_io_spec(SOXR_FLOAT32_I, SOXR_FLOAT32_I);
  const soxr_quality_spec_t q = soxr_quality_spec(SOXR_HQ, 0);
  soxr_t s = soxr_create(kInputRate, kInputRate / ratio, 1, &err, &io, &q, nullptr);
  if (err) throw std::runtime_error(err);
  std::vector<float> out(kChunk);
  for (auto _ : st) {
    size_t off = 0;
    while (off < x.size()) {
      const size_t n = std::min(kChunk, x.size() - off);
      size_t used = 0;
      while (used < n) {
        size_t idone = 0, odone = 0;
        soxr_process(s, x.data() + off + used, n - used, &idone, out.data(), out.size(), &odone);
        used += idone;
        benchmark::DoNotOptimize(out.data());
      }
      off += n;
    }
  }
  soxr_delete(s);
  st.SetItemsProcessed(static_cast<int64_t>(st.iterations() * x.size()));
}
BENCHMARK(BM_SoxrHQ)->DenseRange(0, 1)->ArgName("ratio")->Unit(benchmark::kMillisecond);

// Construction (the decoder makes one resampler per capture).
void BM_SalvorConstruct(benchmark::State& st) {
  const auto c = config(kRatios[st.range(0)], false);
  for (auto _ : st) {
    salvor::Resampler r(c);
    benchmark::DoNotOptimize(&r);
  }
}
BENCHMARK(BM_SalvorConstruct)->DenseRange(0, 1)->ArgName("ratio")->Unit(benchmark::kMicrosecond);

}  // namespace
