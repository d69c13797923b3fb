// The SIMD kernels of the trellis detectors against their scalar references
// (trellis/kernels.hpp): both perform the same float operations in the same order per
// state, so every path metric, decision word, metric difference, LLR and bit must be
// bit-identical (exact equality, no tolerance), on random inputs (random path metrics,
// samples and erasures for every state count) and on synthetic readback (a Lorentzian
// channel with transition jitter and white noise, equalized to PR4 by a least-squares
// FIR, and E2PR4 partial-response samples with white noise).
#include <gtest/gtest.h>

#include <hwy/targets.h>

#include <cmath>
#include <cstring>
#include <utility>
#include <random>

#include "simd_targets.hpp"
#include "channel_sim.hpp"
#include "run_detector.hpp"
#include "trellis/kernels.hpp"
#include "trellis/maxlogmap.hpp"
#include "trellis/sequence_detector.hpp"

using namespace salvor::trellis;
using namespace trellis_test;

using salvor::testing::for_each_simd_target;

namespace {

// Targets of memory 1..5 (2..32 states): dicode, PR4, EPR4, E2PR4, (1-D)(1+D)^4.
const std::vector<std::vector<double>> kTargets = {
    {1, -1}, {1, 0, -1}, {1, 1, -1, -1}, {1, 2, 0, -2, -1}, {1, 3, 2, -2, -3, -1}};
const std::vector<double> kPR4 = {1, 0, -1};
const std::vector<double> kE2PR4 = {1, 2, 0, -2, -1};

struct Tables {
  std::vector<float> out0, out1;
  std::vector<uint8_t> nrzi0, nrzi1;
};

Tables tables_of(const Trellis& t) {
  Tables tb;
  for (int s = 0; s < t.states(); ++s) {
    tb.out0.push_back(static_cast<float>(t.output(0, s)));
    tb.out1.push_back(static_cast<float>(t.output(1, s)));
    tb.nrzi0.push_back(t.nrzi(0, s));
    tb.nrzi1.push_back(t.nrzi(1, s));
  }
  return tb;
}

template <class T>
bool same_bytes(const std::vector<T>& a, const std::vector<T>& b) {
  return a.size() == b.size() && std::memcmp(a.data(), b.data(), a.size() * sizeof(T)) == 0;
}

struct RandomBlock {
  std::vector<float> y;
  std::vector<uint8_t> erased;
};

// The largest noiseless output of a target: the sum of its taps' magnitudes.
double largest_output(const std::vector<double>& f) {
  double sum = 0.0;
  for (double v : f) sum += std::abs(v);
  return sum;
}

RandomBlock random_block(size_t n, double scale, std::mt19937_64& rng) {
  std::normal_distribution<float> g(0.0f, static_cast<float>(scale));
  RandomBlock b;
  for (size_t k = 0; k < n; ++k) {
    b.y.push_back(g(rng));
    b.erased.push_back(rng() % 20 == 0);  // 5 % erased
  }
  return b;
}

// Runs `body(rng, target)` for every target of kTargets on every SIMD target, with a
// fresh random generator per SIMD target, for the fixed-point kernel tests.
struct FixedTarget {
  int S = 0, m = 0;
  FixedAcsTables tables;
  double largest = 0.0;
};
template <class Body>
void for_each_fixed_target(uint64_t seed, Body body) {
  for_each_simd_target([&] {
    std::mt19937_64 rng(seed);
    for (const auto& f : kTargets) {
      const Trellis tr(f);
      FixedTarget ft;
      ft.S = tr.states();
      ft.m = tr.memory();
      ft.tables = make_fixed_acs(ft.m, tr.output_row(0), tr.output_row(1));
      ft.largest = largest_output(f);
      body(rng, ft);
    }
  });
}

}  // namespace


TEST(TrellisSimd, EveryTargetIsExercised) {
  std::vector<std::string> seen;
  for_each_simd_target([&] { seen.push_back(simd_target_name()); });
  ASSERT_FALSE(seen.empty());
  const auto targets = hwy::SupportedAndGeneratedTargets();
  for (size_t i = 0; i < seen.size(); ++i)
    std::printf("  target %s: kernels ran as %s\n", hwy::TargetName(targets[i]), seen[i].c_str());
  std::printf("  normal dispatch: %s\n", simd_target_name());
}

// Every state count, with and without metric differences, random starting metrics and a
// random renormalisation phase; blocks cut at odd lengths.
TEST(TrellisSimd, ViterbiKernelEqualsScalarOnRandomInput) {
  for_each_simd_target([&] {
  std::mt19937_64 rng(101);
  for (const auto& f : kTargets) {
    const Trellis tr(f);
    const int S = tr.states();
    const Tables tb = tables_of(tr);
    const EuclideanAcs acs{S, tb.out0.data(), tb.out1.data()};
    for (int trial = 0; trial < 6; ++trial) {
      const size_t n = 1 + rng() % 700;
      const RandomBlock in = random_block(n, 1.0 + 3.0 * (trial % 3), rng);
      std::uniform_real_distribution<float> u(0.0f, 40.0f);
      std::vector<float> pm_a(S), pm_b;
      for (auto& v : pm_a) v = u(rng);
      pm_b = pm_a;
      const size_t phase = rng() % kRenormInterval;
      const bool with_delta = trial % 2 == 0;
      const uint8_t* er = trial == 5 ? nullptr : in.erased.data();
      std::vector<uint32_t> dec_a(n, 7), dec_b(n, 9);
      std::vector<float> dl_a(with_delta ? n * S : 0, 1.0f), dl_b(dl_a.size(), 2.0f);
      viterbi_euclidean_scalar(acs, pm_a.data(), phase, in.y.data(), er, n, dec_a.data(),
                               with_delta ? dl_a.data() : nullptr);
      viterbi_euclidean_simd(acs, pm_b.data(), phase, in.y.data(), er, n, dec_b.data(),
                             with_delta ? dl_b.data() : nullptr);
      EXPECT_TRUE(same_bytes(pm_a, pm_b)) << S << " states, trial " << trial;
      EXPECT_TRUE(same_bytes(dec_a, dec_b)) << S << " states, trial " << trial;
      EXPECT_TRUE(same_bytes(dl_a, dl_b)) << S << " states, trial " << trial;
      // The decisions are not trivial: both branches are taken somewhere.
      uint32_t any = 0, all = ~0u;
      for (uint32_t d : dec_a) {
        any |= d;
        all &= d;
      }
      if (n > 50) {
        EXPECT_NE(any, 0u);
        EXPECT_NE(all, S == 32 ? ~0u : (1u << S) - 1u);
      }
    }
  }
  });
}

// The fixed-point kernel: quantization, path metrics, traceback words and per-lane deltas
// bit-identical to the scalar reference for every state count, random starting metrics,
// random span positions (layout and renormalisation phases), samples beyond the clamp,
// erasures; the SIMD side runs each block in two calls cut at a random step.
TEST(TrellisSimd, FixedPointKernelEqualsScalarOnRandomInput) {
  for_each_fixed_target(404, [&](std::mt19937_64& rng, const FixedTarget& ft) {
    const int S = ft.S;
    const FixedAcsTables& t = ft.tables;
    for (int trial = 0; trial < 8; ++trial) {
      const size_t n = 1 + rng() % 900;
      // Up to 2.5 times the largest output: some samples hit the clamp.
      const RandomBlock in = random_block(n, ft.largest * (0.3 + 0.3 * (trial % 4)), rng);
      std::vector<int16_t> qa(n), qb(n, 99);
      quantize_samples_scalar(t, in.y.data(), n, qa.data());
      quantize_samples_simd(t, in.y.data(), n, qb.data());
      EXPECT_TRUE(same_bytes(qa, qb)) << S << " states, trial " << trial;
      std::vector<uint16_t> pm_a(S), pm_b;
      for (auto& v : pm_a) v = static_cast<uint16_t>(rng() % 20000);
      pm_b = pm_a;
      const size_t step0 = rng() % 1000;
      const bool with_delta = trial % 2 == 0;
      const uint8_t* er = trial == 7 ? nullptr : in.erased.data();
      std::vector<uint64_t> dec_a(n, 7), dec_b(n, 9);
      std::vector<uint16_t> dl_a(with_delta ? n * S : 0, 1), dl_b(dl_a.size(), 2);
      viterbi_fixed_scalar(t, pm_a.data(), step0, qa.data(), er, n, dec_a.data(),
                           with_delta ? dl_a.data() : nullptr);
      const size_t cut = rng() % (n + 1);
      for (const auto& [from, len] : {std::pair<size_t, size_t>{0, cut}, {cut, n - cut}})
        viterbi_fixed_simd(t, pm_b.data(), step0 + from, qa.data() + from,
                           er ? er + from : nullptr, len, dec_b.data() + from,
                           with_delta ? dl_b.data() + from * S : nullptr);
      EXPECT_TRUE(same_bytes(pm_a, pm_b)) << S << " states, trial " << trial;
      EXPECT_TRUE(same_bytes(dec_a, dec_b)) << S << " states, trial " << trial;
      EXPECT_TRUE(same_bytes(dl_a, dl_b)) << S << " states, trial " << trial;
      uint64_t any = 0, all = ~uint64_t{0};
      for (uint64_t d : dec_a) {
        any |= d;
        all &= d;
      }
      if (n > 50) {
        EXPECT_NE(any, 0u);
        EXPECT_NE(all, ~uint64_t{0});
      }
    }
  });
}

// The two-trellis fixed-point kernel: each lane bit-identical to its own scalar run, for
// every state count (8 and 16 states run side by side in one vector, the others fall back
// to two single runs), random starting metrics and samples per lane, erasures in either
// lane or both, deltas on and off, each block split into two calls at a random step.
TEST(TrellisSimd, DualFixedPointKernelEqualsTwoScalarRuns) {
  for_each_fixed_target(606, [&](std::mt19937_64& rng, const FixedTarget& ft) {
    const int S = ft.S, m = ft.m;
    const FixedAcsTables& t = ft.tables;
    const double largest = ft.largest;
    for (int trial = 0; trial < 8; ++trial) {
      const size_t n = 1 + rng() % 700;
      struct Lane {
        RandomBlock in;
        std::vector<int16_t> yq;
        std::vector<uint16_t> pm_ref, pm;
        std::vector<uint64_t> dec_ref, dec;
        std::vector<uint16_t> dl_ref, dl;
        bool erasures = false;
      } lanes[2];
      const bool with_delta = trial % 2 == 0;
      for (int j = 0; j < 2; ++j) {
        Lane& L = lanes[j];
        L.in = random_block(n, largest * (0.3 + 0.3 * ((trial + j) % 4)), rng);
        L.yq.resize(n);
        quantize_samples_scalar(t, L.in.y.data(), n, L.yq.data());
        L.pm_ref.resize(S);
        for (auto& v : L.pm_ref) v = static_cast<uint16_t>(rng() % 20000);
        L.pm = L.pm_ref;
        L.dec_ref.assign(n, 7);
        L.dec.assign(n, 9);
        L.dl_ref.assign(with_delta ? n * S : 0, 1);
        L.dl.assign(L.dl_ref.size(), 2);
        L.erasures = ((trial >> j) & 1) != 0 || trial == 6;  // none, A, B or both
      }
      const size_t step0 = fixed_dual_period(m) * (rng() % 50) + rng() % fixed_dual_period(m);
      auto lane = [&](Lane& L, bool ref, size_t from) {
        FixedLane x;
        x.pm = ref ? L.pm_ref.data() : L.pm.data();
        x.yq = L.yq.data() + from;
        x.erased = L.erasures ? L.in.erased.data() + from : nullptr;
        x.decisions = (ref ? L.dec_ref.data() : L.dec.data()) + from;
        x.delta = with_delta ? (ref ? L.dl_ref.data() : L.dl.data()) + from * S : nullptr;
        return x;
      };
      viterbi_fixed_dual_scalar(t, step0, n, lane(lanes[0], true, 0), lane(lanes[1], true, 0));
      const size_t cut = rng() % (n + 1);
      viterbi_fixed_dual_simd(t, step0, cut, lane(lanes[0], false, 0), lane(lanes[1], false, 0));
      viterbi_fixed_dual_simd(t, step0 + cut, n - cut, lane(lanes[0], false, cut),
                              lane(lanes[1], false, cut));
      for (int j = 0; j < 2; ++j) {
        const Lane& L = lanes[j];
        EXPECT_TRUE(same_bytes(L.pm_ref, L.pm)) << S << " states, trial " << trial << ", lane " << j;
        EXPECT_TRUE(same_bytes(L.dec_ref, L.dec)) << S << " states, trial " << trial << ", lane " << j;
        EXPECT_TRUE(same_bytes(L.dl_ref, L.dl)) << S << " states, trial " << trial << ", lane " << j;
      }
      // The two lanes really are independent runs (different samples, different words).
      if (n > 50) {
        EXPECT_FALSE(same_bytes(lanes[0].dec_ref, lanes[1].dec_ref));
      }
    }
  });
}

// The traceback of bit tests and adds with carry follows the same survivor as the plain
// state-by-state loop on state-ordered decisions (the reference), for every memory, from
// a plain array, from a ring, and as two chains cut at a step (right and wrong guesses of
// the state there).
TEST(TrellisTraceback, TraceLevelsFollowsTheSurvivor) {
  std::mt19937_64 rng(505);
  for (int m = 1; m <= 5; ++m) {
    const int S = 1 << m;
    const TraceWordTable table(m);
    for (int trial = 0; trial < 20; ++trial) {
      const size_t n = rng() % 600;
      std::vector<uint32_t> dec(n);
      std::vector<uint64_t> words(n);
      for (size_t t = 0; t < n; ++t) {
        dec[t] = static_cast<uint32_t>(rng()) & (S == 32 ? ~0u : (1u << S) - 1u);
        words[t] = table(dec[t]);
        ASSERT_EQ(state_ordered_decisions(words[t], m), dec[t]);
      }
      const int start = static_cast<int>(rng() % S);
      // Reference: x_(t-m) is the branch taken into the state after step t.
      std::vector<int> level(n + m);  // level[i] = x_(i - m), 1 = +1
      int s = start;
      for (int i = 0; i < m; ++i) level[n + i] = (s >> (m - 1 - i)) & 1;  // x_(n-m+i)
      for (size_t t = n; t-- > 0;) {
        const int j = (dec[t] >> s) & 1;
        level[t] = j;
        s = (s >> 1) | (j << (m - 1));
      }
      std::vector<uint64_t> bits((n + m + 63) / 64 + 1, 0xdeadbeefdeadbeefull);
      trace_levels(words.data(), n, m, start, bits.data());
      for (size_t i = 0; i < n + m; ++i)
        ASSERT_EQ(static_cast<int>((bits[i / 64] >> (i % 64)) & 1), level[i])
            << "memory " << m << " trial " << trial << " bit " << i << " of " << n + m;
      // The same words in a ring of 700 starting at a random slot (wrapping or not).
      const size_t ring_size = 700, head = rng() % ring_size;
      std::vector<uint64_t> ring(ring_size, ~uint64_t{0});
      for (size_t t = 0; t < n; ++t) ring[(head + t) % ring_size] = words[t];
      std::vector<uint64_t> bits_ring(bits.size(), 0x0123456789abcdefull);
      trace_levels_ring(ring.data(), ring_size, head, n, m, start, bits_ring.data());
      for (size_t i = 0; i < n + m; ++i)
        ASSERT_EQ(static_cast<int>((bits_ring[i / 64] >> (i % 64)) & 1), level[i])
            << "ring: memory " << m << " trial " << trial << " head " << head << " bit " << i;
      // Two chains cut at a random step, from the survivor's true state there and from a
      // random guess: the same bits either way, and the guess reported as held or not.
      if (n < 2) continue;
      // A random cut, and one on a word boundary (where no word is shared by the chains).
      const size_t cuts[2] = {1 + rng() % (n - 1), std::min<size_t>(n - 1, 64 * (1 + rng() % 4))};
      for (const size_t mid : cuts) {
        int true_mid = 0;
        for (int i = 0; i < m; ++i) true_mid |= level[mid + i] << (m - 1 - i);
        for (const int guess : {true_mid, static_cast<int>(rng() % S)}) {
          std::vector<uint64_t> bits_split(bits.size(), 0x5555aaaa5555aaaaull);
          EXPECT_EQ(trace_levels_split(words.data(), n, m, start, mid, guess, bits_split.data()),
                    guess == true_mid);
          for (size_t i = 0; i < n + m; ++i)
            ASSERT_EQ(static_cast<int>((bits_split[i / 64] >> (i % 64)) & 1), level[i])
                << "split: memory " << m << " trial " << trial << " mid " << mid << " guess " << guess
                << " bit " << i;
        }
      }
    }
  }
}

// The noise-predictive / pattern-dependent kernel with random per-branch tables (bias,
// variances, coefficients) and random survivor noise histories, every order 0..4.
TEST(TrellisSimd, PredictiveKernelEqualsScalarOnRandomInput) {
  for_each_simd_target([&] {
    std::mt19937_64 rng(105);
    for (const auto& f : kTargets) {
      const Trellis tr(f);
      const int S = tr.states();
      const Tables tb = tables_of(tr);
      for (int order = 0; order <= kMaxOrder; ++order) {
        std::uniform_real_distribution<float> u(-1.0f, 1.0f), pos(0.2f, 3.0f);
        std::vector<float> bias(2 * S), lv(2 * S), iv(2 * S), coef(2 * order * S + 1);
        for (auto& v : bias) v = 0.3f * u(rng);
        for (auto& v : iv) v = pos(rng);
        for (int i = 0; i < 2 * S; ++i) lv[i] = -std::log(iv[i]);
        for (auto& v : coef) v = 0.5f * u(rng);
        PredictiveAcs t;
        t.states = S;
        t.order = order;
        for (int j = 0; j < 2; ++j) {
          t.out[j] = j ? tb.out1.data() : tb.out0.data();
          t.bias[j] = &bias[j * S];
          t.log_var[j] = &lv[j * S];
          t.inv_var[j] = &iv[j * S];
          t.coef[j] = &coef[j * order * S];
        }
        const size_t n = 1 + rng() % 600;
        const RandomBlock in = random_block(n, 2.0, rng);
        std::vector<float> pm_a(S), hist_a(order * S);
        for (auto& v : pm_a) v = 20.0f * (u(rng) + 1.0f);
        for (auto& v : hist_a) v = u(rng);
        std::vector<float> pm_b = pm_a, hist_b = hist_a;
        const size_t phase = rng() % kRenormInterval;
        std::vector<uint32_t> dec_a(n), dec_b(n, 1);
        std::vector<float> dl_a(n * S), dl_b(n * S, 3.0f);
        viterbi_predictive_scalar(t, pm_a.data(), hist_a.data(), phase, in.y.data(),
                                  in.erased.data(), n, dec_a.data(), dl_a.data());
        viterbi_predictive_simd(t, pm_b.data(), hist_b.data(), phase, in.y.data(),
                                in.erased.data(), n, dec_b.data(), dl_b.data());
        EXPECT_TRUE(same_bytes(pm_a, pm_b)) << S << " states, order " << order;
        EXPECT_TRUE(same_bytes(hist_a, hist_b)) << S << " states, order " << order;
        EXPECT_TRUE(same_bytes(dec_a, dec_b)) << S << " states, order " << order;
        EXPECT_TRUE(same_bytes(dl_a, dl_b)) << S << " states, order " << order;
      }
    }
  });
}

TEST(TrellisSimd, MaxLogKernelsEqualScalarOnRandomInput) {
  for_each_simd_target([&] {
  std::mt19937_64 rng(102);
  for (const auto& f : kTargets) {
    const Trellis tr(f);
    const int S = tr.states();
    const Tables tb = tables_of(tr);
    const MaxLogTables mt{S, tb.out0.data(), tb.out1.data(), tb.nrzi0.data(), tb.nrzi1.data()};
    for (int trial = 0; trial < 6; ++trial) {
      const size_t n = 1 + rng() % 600;
      const size_t n_llr = trial % 3 == 0 ? n : 1 + rng() % n;
      const RandomBlock in = random_block(n, 1.0 + 2.0 * (trial % 3), rng);
      const uint8_t* er = trial == 5 ? nullptr : in.erased.data();
      std::uniform_real_distribution<float> u(-30.0f, 0.0f);
      std::vector<float> a_in(S), b_a(S), b_b;
      for (auto& v : a_in) v = u(rng);
      for (auto& v : b_a) v = u(rng);
      b_b = b_a;
      std::vector<float> al_a(n * S), al_b(n * S, 5.0f);
      maxlog_forward_scalar(mt, a_in.data(), in.y.data(), er, n, al_a.data());
      maxlog_forward_simd(mt, a_in.data(), in.y.data(), er, n, al_b.data());
      EXPECT_TRUE(same_bytes(al_a, al_b)) << S << " states, trial " << trial;
      std::vector<float> raw_a(n, 1.0f), raw_b(n, 2.0f);
      std::vector<uint16_t> best_a(n, 1), best_b(n, 2);
      maxlog_backward_scalar(mt, a_in.data(), al_a.data(), in.y.data(), er, n, n_llr, b_a.data(),
                             raw_a.data(), best_a.data());
      maxlog_backward_simd(mt, a_in.data(), al_a.data(), in.y.data(), er, n, n_llr, b_b.data(),
                           raw_b.data(), best_b.data());
      EXPECT_TRUE(same_bytes(b_a, b_b)) << S << " states, trial " << trial;
      raw_a.resize(n_llr);
      raw_b.resize(n_llr);
      best_a.resize(n_llr);
      best_b.resize(n_llr);
      EXPECT_TRUE(same_bytes(raw_a, raw_b)) << S << " states, trial " << trial;
      EXPECT_TRUE(same_bytes(best_a, best_b)) << S << " states, trial " << trial;
    }
  }
  });
}

// The forward and backward recursions side by side (maxlog_forward_backward_simd) against
// the scalar forward, then backward: the same alpha, final beta, LLRs and best branches,
// bit for bit, for block lengths down to 0 and 1 and warm-ups of every length.
TEST(TrellisSimd, MaxLogSideBySideEqualsForwardThenBackward) {
  for_each_simd_target([&] {
    std::mt19937_64 rng(104);
    for (const auto& f : kTargets) {
      const Trellis tr(f);
      const int S = tr.states();
      const Tables tb = tables_of(tr);
      const MaxLogTables mt{S, tb.out0.data(), tb.out1.data(), tb.nrzi0.data(), tb.nrzi1.data()};
      for (int trial = 0; trial < 10; ++trial) {
        const size_t emit = trial == 0 ? 0 : trial == 1 ? 1 : rng() % 400;
        const size_t total = emit + (emit == 0 ? 1 + rng() % 100 : trial % 3 == 0 ? 0 : rng() % 100);
        const RandomBlock in = random_block(total, 1.0 + 2.0 * (trial % 3), rng);
        const uint8_t* er = trial % 4 == 3 ? nullptr : in.erased.data();
        std::uniform_real_distribution<float> u(-30.0f, 0.0f);
        std::vector<float> a_in(S), b_a(S), b_b;
        for (auto& v : a_in) v = u(rng);
        for (auto& v : b_a) v = u(rng);
        b_b = b_a;
        std::vector<float> al_a(std::max<size_t>(emit, 1) * S), al_b(al_a.size(), 5.0f);
        std::vector<float> raw_a(emit + 1, 1.0f), raw_b(emit + 1, 1.0f), kept((emit - emit / 2 + 2 * (emit / 2)) * S + 1, 7.0f);
        std::vector<uint16_t> best_a(emit + 1, 1), best_b(emit + 1, 1);
        maxlog_forward_scalar(mt, a_in.data(), in.y.data(), er, emit, al_a.data());
        maxlog_backward_scalar(mt, a_in.data(), al_a.data(), in.y.data(), er, total, emit, b_a.data(), raw_a.data(),
                               best_a.data());
        maxlog_forward_backward_simd(mt, a_in.data(), in.y.data(), er, emit, total, al_b.data(), b_b.data(),
                                     kept.data(), raw_b.data(), trial % 2 ? best_b.data() : nullptr);
        const std::string what = std::to_string(S) + " states, emit " + std::to_string(emit) + ", total " +
                                 std::to_string(total);
        if (emit > 0) {
          EXPECT_TRUE(same_bytes(al_a, al_b)) << what;
        }
        EXPECT_TRUE(same_bytes(b_a, b_b)) << what;
        EXPECT_TRUE(same_bytes(raw_a, raw_b)) << what;
        if (trial % 2) {
          EXPECT_TRUE(same_bytes(best_a, best_b)) << what;
        }
      }
    }
  });
}

namespace {

// Equalized readback of a Lorentzian channel with jitter and noise (PR4 target).
std::vector<float> lorentzian_readback(size_t n, uint64_t seed) {
  LorentzianChannel ch;
  ch.density = 2.5;
  ch.jitter_sigma = 0.05;
  ch.noise_sigma = 0.08;
  std::mt19937_64 rng(seed);
  const auto x_train = levels_from_nrzi(random_bits(20000, rng));
  const Fir eq = best_ls_fir(ch.readback(x_train, rng), pr_channel(x_train, kPR4), 21);
  return to_float(eq.apply(ch.readback(levels_from_nrzi(random_bits(n, rng)), rng)));
}

std::vector<float> e2pr4_readback(size_t n, double sigma, uint64_t seed) {
  std::mt19937_64 rng(seed);
  return add_noise(pr_channel(levels_from_nrzi(random_bits(n, rng)), kE2PR4), sigma, rng);
}

template <class Det, class Config>
void expect_same_output(const std::vector<double>& f, Config c, const std::vector<float>& y,
                        const std::vector<uint8_t>& er, size_t chunk, const char* what) {
  c.simd = false;
  Det scalar(f, c);
  c.simd = true;
  Det simd(f, c);
  const Decided a = run_detector(scalar, y, er, chunk);
  const Decided b = run_detector(simd, y, er, chunk == 0 ? 1000 : 0);  // other chunking too
  ASSERT_EQ(a.bits.size(), y.size()) << what;
  EXPECT_EQ(a.bits, b.bits) << what;
  EXPECT_TRUE(same_bytes(a.llr, b.llr)) << what;
  // Not a degenerate output: both signs and more than one magnitude occur.
  size_t ones = 0;
  for (uint8_t v : a.bits) ones += v;
  EXPECT_GT(ones, y.size() / 5) << what;
  EXPECT_LT(ones, y.size() * 4 / 5) << what;
}

std::vector<uint8_t> some_erasures(size_t n, uint64_t seed) {
  std::mt19937_64 rng(seed);
  std::vector<uint8_t> er(n, 0);
  for (size_t k = 0; k < n; ++k) er[k] = rng() % 97 == 0;
  return er;
}

}  // namespace

TEST(TrellisSimd, ViterbiDetectorEqualsScalarOnSyntheticReadback) {
  for_each_simd_target([&] {
  const auto y_pr4 = lorentzian_readback(30000, 201);
  const auto y_e2 = e2pr4_readback(30000, 0.6, 202);
  const auto er = some_erasures(30000, 203);
  for (bool rel : {false, true})
    for (double sigma : {0.0, 0.5}) {
      SequenceDetectorConfig c;
      c.reliability = rel;
      c.noise_sigma = sigma;
      expect_same_output<SequenceDetector>(kPR4, c, y_pr4, {}, 777, "PR4 readback");
      expect_same_output<SequenceDetector>(kE2PR4, c, y_e2, {}, 0, "E2PR4");
      expect_same_output<SequenceDetector>(kE2PR4, c, y_e2, er, 4096, "E2PR4 with erasures");
      c.traceback_depth = 24;
      c.reliability_window = 24;
      expect_same_output<SequenceDetector>(kTargets[4], c, y_e2, er, 333, "32 states");
      expect_same_output<SequenceDetector>(kTargets[0], c, y_pr4, {}, 50, "2 states");
    }
  });
}

// The noise-predictive metrics stay in double; their SOVA update takes the SIMD path.
TEST(TrellisSimd, NoisePredictiveSovaEqualsScalarOnSyntheticReadback) {
  for_each_simd_target([&] {
    LorentzianChannel ch;
    ch.density = 2.5;
    ch.jitter_sigma = 0.05;
    ch.noise_sigma = 0.1;
    std::mt19937_64 rng(221);
    const Bits a_train = random_bits(20000, rng);
    const auto x_train = levels_from_nrzi(a_train);
    const auto r_train = ch.readback(x_train, rng);
    const Fir eq = best_ls_fir(r_train, pr_channel(x_train, kPR4), 21);
    const auto y_train = to_float(eq.apply(r_train));
    const auto y = to_float(eq.apply(ch.readback(levels_from_nrzi(random_bits(20000, rng)), rng)));
    for (MetricKind kind : {MetricKind::noise_predictive, MetricKind::pattern_dependent}) {
      SequenceDetectorConfig c;
      c.kind = kind;
      Decided out[2];
      for (int simd = 0; simd < 2; ++simd) {
        c.simd = simd != 0;
        SequenceDetector det(kPR4, c);
        det.train(std::span<const float>(y_train).subspan(64, 19000),
                  std::span<const uint8_t>(a_train).subspan(64, 19000),
                  x_train[63] > 0 ? 1 : -1);
        out[simd] = run_detector(det, y, {}, simd ? 0 : 1234);
      }
      EXPECT_EQ(out[0].bits, out[1].bits);
      EXPECT_TRUE(same_bytes(out[0].llr, out[1].llr));
    }
  });
}

TEST(TrellisSimd, MaxLogMapEqualsScalarOnSyntheticReadback) {
  for_each_simd_target([&] {
  const auto y_pr4 = lorentzian_readback(30000, 211);
  const auto y_e2 = e2pr4_readback(30000, 0.6, 212);
  const auto er = some_erasures(30000, 213);
  for (double sigma : {0.0, 0.5}) {
    MaxLogMapConfig c;
    c.noise_sigma = sigma;
    expect_same_output<MaxLogMap>(kPR4, c, y_pr4, {}, 777, "PR4 readback");
    expect_same_output<MaxLogMap>(kE2PR4, c, y_e2, er, 0, "E2PR4 with erasures");
    c.block_length = 100;
    c.overlap = 37;
    expect_same_output<MaxLogMap>(kTargets[4], c, y_e2, er, 333, "32 states");
    expect_same_output<MaxLogMap>(kTargets[0], c, y_pr4, {}, 50, "2 states");
  }
  });
}

// The SOVA update on random survivors: random decisions, a survivor traced through them
// (so that competitors do meet it), random deltas with some skipped (+inf), every memory
// and window length; the padding the SIMD kernel needs is filled with junk.
TEST(TrellisSimd, SovaKernelEqualsScalarOnRandomPaths) {
  for_each_simd_target([&] {
    std::mt19937_64 rng(103);
    for (int m = 1; m <= kMaxMemory; ++m)
      for (size_t window : {1, 5, 32, 64, 256}) {
        const size_t n = 1 + rng() % 512, pad = 256 + kSovaPad, front = 256;
        std::vector<uint32_t> dec(n + pad);
        std::vector<uint8_t> state(n + pad), branch(n + pad), bit(n + pad);
        std::vector<float> delta(n + pad), rel_a(n + pad), rel_b;
        for (auto& v : dec) v = static_cast<uint32_t>(rng());
        for (auto& v : state) v = static_cast<uint8_t>(rng() & ((1 << m) - 1));
        std::uniform_real_distribution<float> u(0.0f, 50.0f);
        for (auto& v : delta) v = rng() % 7 == 0 ? INFINITY : u(rng);
        for (auto& v : rel_a) v = rng() % 3 == 0 ? INFINITY : u(rng);
        // The survivor: traced back from a random final state through the decisions.
        unsigned s = static_cast<unsigned>(rng() & ((1 << m) - 1));
        for (size_t t = n; t-- > 0;) {
          const unsigned j = (dec[front + t] >> s) & 1u;
          state[front + t] = static_cast<uint8_t>(s);
          branch[front + t] = static_cast<uint8_t>(j);
          const unsigned w = s | (j << m);
          bit[front + t] = static_cast<uint8_t>((w ^ (w >> 1)) & 1u);
          s = (s >> 1) | (j << (m - 1));
        }
        rel_b = rel_a;
        const std::vector<float> rel0 = rel_a;
        const size_t last = 1 + rng() % n;
        const SovaPath p{m, dec.data() + front, state.data() + front, branch.data() + front,
                         bit.data() + front, delta.data() + front};
        sova_scalar(p, last, window, rel_a.data() + front);
        sova_simd(p, last, window, rel_b.data() + front);
        EXPECT_TRUE(same_bytes(rel_a, rel_b)) << "memory " << m << ", window " << window;
        // (with window 1 only the merge step itself is seen, where the NRZI bits agree)
        if (window > 1) {
          EXPECT_FALSE(same_bytes(rel_a, rel0)) << "no reliability was lowered";
        }
      }
  });
}
