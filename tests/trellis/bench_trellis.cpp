// Throughput of the trellis detectors (bits per second on one core) for 4, 8, 16 and 32
// states: viterbi (with and without SOVA reliabilities), npml, pdnp and max-log-MAP; and
// the fixed-point add-compare-select alone, one trellis at a time and two side by side.
// Not a test: built as its own executable, not registered with CTest.
#include <benchmark/benchmark.h>

#include <random>

#include "channel_sim.hpp"
#include "trellis/kernels.hpp"
#include "trellis/maxlogmap.hpp"
#include "trellis/sequence_detector.hpp"

using namespace salvor::trellis;
using namespace trellis_test;

namespace {

// Targets of memory 2..5: PR4 (4 states), EPR4 (8), E2PR4 (16), (1-D)(1+D)^4 (32).
std::vector<double> target_for_states(int states) {
  switch (states) {
    case 4: return {1, 0, -1};
    case 8: return {1, 1, -1, -1};
    case 16: return {1, 2, 0, -2, -1};
    default: return {1, 3, 2, -2, -3, -1};
  }
}

struct Input {
  std::vector<float> y;
  std::vector<uint8_t> bits;
  std::vector<float> llr;
};

Input make_input(const std::vector<double>& f, size_t n) {
  std::mt19937_64 rng(77);
  Input in;
  in.y = add_noise(pr_channel(levels_from_nrzi(random_bits(n, rng)), f), 0.5, rng);
  in.bits.resize(n + 8192);
  in.llr.resize(n + 8192);
  return in;
}

template <class Det>
void run(benchmark::State& state, Det& det, Input& in) {
  for (auto _ : state) {
    det.reset();
    auto p = det.process(in.y, {}, in.bits, in.llr);
    size_t extra = det.flush(std::span<uint8_t>(in.bits).subspan(p.produced),
                             std::span<float>(in.llr).subspan(p.produced));
    benchmark::DoNotOptimize(extra);
    benchmark::DoNotOptimize(in.bits.data());
  }
  state.SetItemsProcessed(static_cast<int64_t>(state.iterations()) * in.y.size());
  state.counters["bits/s"] = benchmark::Counter(
      static_cast<double>(state.iterations()) * in.y.size(), benchmark::Counter::kIsRate);
}

constexpr size_t kBits = 1 << 16;

void BM_Viterbi(benchmark::State& state) {
  const auto f = target_for_states(static_cast<int>(state.range(0)));
  SequenceDetectorConfig c;
  c.reliability = state.range(1) != 0;
  c.noise_sigma = 0.5;
  SequenceDetector det(f, c);
  Input in = make_input(f, kBits);
  run(state, det, in);
}

void BM_Npml(benchmark::State& state) {
  const auto f = target_for_states(static_cast<int>(state.range(0)));
  SequenceDetectorConfig c;
  c.kind = MetricKind::noise_predictive;
  c.predictor_order = 2;
  c.reliability = true;
  SequenceDetector det(f, c);
  std::mt19937_64 rng(5);
  const Bits a = random_bits(20000, rng);
  det.train(add_noise(pr_channel(levels_from_nrzi(a), f), 0.5, rng), a, -1);
  Input in = make_input(f, kBits);
  run(state, det, in);
}

void BM_Pdnp(benchmark::State& state) {
  const int states = static_cast<int>(state.range(0));
  const auto f = target_for_states(states);
  SequenceDetectorConfig c;
  c.kind = MetricKind::pattern_dependent;
  c.pattern_bits = static_cast<int>(f.size());  // one model per branch
  c.predictor_order = 2;
  SequenceDetector det(f, c);
  std::mt19937_64 rng(6);
  const Bits a = random_bits(20000, rng);
  det.train(add_noise(pr_channel(levels_from_nrzi(a), f), 0.5, rng), a, -1);
  Input in = make_input(f, kBits);
  run(state, det, in);
}

void BM_MaxLogMap(benchmark::State& state) {
  const auto f = target_for_states(static_cast<int>(state.range(0)));
  MaxLogMapConfig c;
  c.noise_sigma = 0.5;
  MaxLogMap det(f, c);
  Input in = make_input(f, kBits);
  run(state, det, in);
}

}  // namespace


// The fixed-point add-compare-select kernel alone on quantized samples: `lanes` 1 runs one
// trellis over the block, 2 runs the block's two halves side by side (the same number of
// state updates). Items are state updates.
void BM_FixedAcs(benchmark::State& state) {
  const int S = static_cast<int>(state.range(0));
  const bool dual = state.range(1) == 2;
  const auto f = target_for_states(S);
  const Trellis tr(f);
  const FixedAcsTables t = make_fixed_acs(tr.memory(), tr.output_row(0), tr.output_row(1));
  Input in = make_input(f, kBits);
  std::vector<int16_t> yq(kBits);
  quantize_samples_simd(t, in.y.data(), kBits, yq.data());
  std::vector<uint16_t> pm(2 * S, 0);
  std::vector<uint64_t> dec(kBits);
  const size_t half = kBits / 2;
  for (auto _ : state) {
    if (dual) {
      const FixedLane a{pm.data(), yq.data(), nullptr, dec.data(), nullptr};
      const FixedLane b{pm.data() + S, yq.data() + half, nullptr, dec.data() + half, nullptr};
      viterbi_fixed_dual_simd(t, 0, half, a, b);
    } else {
      viterbi_fixed_simd(t, pm.data(), 0, yq.data(), nullptr, kBits, dec.data(), nullptr);
    }
    benchmark::DoNotOptimize(dec.data());
  }
  state.SetItemsProcessed(static_cast<int64_t>(state.iterations()) * kBits * S);
}

BENCHMARK(BM_Viterbi)->ArgsProduct({{4, 8, 16, 32}, {0, 1}})->ArgNames({"states", "sova"});
BENCHMARK(BM_Npml)->ArgsProduct({{4, 8, 16, 32}})->ArgNames({"states"});
BENCHMARK(BM_Pdnp)->ArgsProduct({{4, 8, 16, 32}})->ArgNames({"states"});
BENCHMARK(BM_MaxLogMap)->ArgsProduct({{4, 8, 16, 32}})->ArgNames({"states"});
BENCHMARK(BM_FixedAcs)->ArgsProduct({{8, 16}, {1, 2}})->ArgNames({"states", "lanes"});
BENCHMARK_MAIN();
