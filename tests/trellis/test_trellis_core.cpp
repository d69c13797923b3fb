// Trellis construction, error-event distances, exact agreement of the Viterbi and
// max-log-MAP detectors with exhaustive searches, SOVA bounds, the memoryless LLR, and
// the noise-model estimators.
#include <gtest/gtest.h>

#include <cmath>
#include <cstdio>
#include <functional>
#include <limits>
#include <random>

#include "channel_sim.hpp"
#include "common/error.hpp"
#include "run_detector.hpp"
#include "trellis/maxlogmap.hpp"
#include "trellis/noise_model.hpp"
#include "trellis/sequence_detector.hpp"
#include "trellis/trellis.hpp"

using namespace salvor::trellis;
using namespace trellis_test;

namespace {

const std::vector<double> kPR4 = {1, 0, -1};
const std::vector<double> kEPR4 = {1, 1, -1, -1};
const std::vector<double> kE2PR4 = {1, 2, 0, -2, -1};

// A random monic target of length 3..5 (a generalized PR target).
std::vector<double> random_gpr(std::mt19937_64& rng) {
  std::uniform_int_distribution<int> len(3, 5);
  std::uniform_real_distribution<double> tap(-1.0, 1.0);
  std::vector<double> f(len(rng));
  f[0] = 1.0;
  for (size_t i = 1; i < f.size(); ++i) f[i] = tap(rng);
  return f;
}

// Exhaustive maximum-likelihood search: every level sequence x_(-m)..x_(N-1) (m = the
// trellis memory, levels before the block unknown), metric sum over non-erased k of
// (y_k - sum_i f_i x_(k-i))^2, branch-and-bound pruning (exact: partial sums only grow).
// `metric` replaces the squared error (see fixed_point_metric).
using BranchMetric = std::function<double(int k, double out)>;
Bits exhaustive_ml(const std::vector<float>& y, const std::vector<double>& f, int m,
                   const std::vector<uint8_t>& erased, const BranchMetric& metric = {}) {
  const int N = static_cast<int>(y.size());
  std::vector<double> x(N + m), best_x;
  double best = std::numeric_limits<double>::infinity();
  std::function<void(int, double)> dfs = [&](int p, double partial) {
    if (partial >= best) return;
    if (p == N + m) {
      best = partial;
      best_x = x;
      return;
    }
    for (double v : {-1.0, 1.0}) {
      x[p] = v;
      double cost = partial;
      const int k = p - m;
      if (k >= 0 && !(erased.size() && erased[k])) {
        double out = 0.0;
        for (size_t i = 0; i < f.size(); ++i) out += f[i] * x[p - i];
        cost += metric ? metric(k, out) : (y[k] - out) * (y[k] - out);
      }
      dfs(p + 1, cost);
    }
  };
  dfs(0, 0.0);
  Bits a(N);
  for (int k = 0; k < N; ++k) a[k] = best_x[k + m] != best_x[k + m - 1];
  return a;
}

// The metric of the best level sequence whose NRZI bits are `a` (the global sign and the
// levels x_(-m)..x_(-2), which NRZI bits do not fix, minimised over).
double metric_of_nrzi(const std::vector<float>& y, const std::vector<double>& f, int m,
                      const std::vector<uint8_t>& erased, const Bits& a,
                      const BranchMetric& branch_metric = {}) {
  const int N = static_cast<int>(y.size());
  double best = std::numeric_limits<double>::infinity();
  std::vector<double> x(N + m);
  for (int code = 0; code < (1 << m); ++code) {
    for (int i = 0; i < m; ++i) x[i] = (code >> i) & 1 ? 1.0 : -1.0;  // x_(-m)..x_(-1)
    for (int k = 0; k < N; ++k) x[k + m] = a[k] ? -x[k + m - 1] : x[k + m - 1];
    double metric = 0.0;
    for (int k = 0; k < N; ++k) {
      if (erased.size() && erased[k]) continue;
      double out = 0.0;
      for (size_t i = 0; i < f.size(); ++i) out += f[i] * x[k + m - i];
      metric += branch_metric ? branch_metric(k, out) : (y[k] - out) * (y[k] - out);
    }
    best = std::min(best, metric);
  }
  return best;
}

// The fixed-point metric as trellis/kernels.hpp documents it, computed here from the
// target alone: gain = 85 / (largest |output|) = 85 / sum |f_i|, y_q = nearest(clamp(
// y * gain, -170, 170)), o_q = nearest(out * gain), metric = (y_q - o_q)^2 >> 4.
BranchMetric fixed_point_metric(const std::vector<float>& y, const std::vector<double>& f) {
  double largest = 0.0;
  for (double v : f) largest += std::abs(v);
  const auto gain = static_cast<float>(85.0 / largest);
  std::vector<int> yq(y.size());
  for (size_t k = 0; k < y.size(); ++k)
    yq[k] = static_cast<int>(std::nearbyint(std::min(std::max(y[k] * gain, -170.0f), 170.0f)));
  return [yq, gain](int k, double out) {
    const int e = yq[k] - static_cast<int>(std::nearbyint(out * double{gain}));
    return static_cast<double>((e * e) >> 4);
  };
}

// Brute-force max-log LLR of every NRZI bit: best metric over all sequences with a_k = 1
// minus best with a_k = 0, in units of 1/(2 sigma^2).
std::vector<double> brute_force_maxlog(const std::vector<float>& y, const std::vector<double>& f,
                                       int m, double sigma) {
  const int N = static_cast<int>(y.size());
  const int total = N + m;
  std::vector<double> best1(N, INFINITY), best0(N, INFINITY);
  std::vector<double> x(total);
  for (long code = 0; code < (1L << total); ++code) {
    for (int p = 0; p < total; ++p) x[p] = (code >> p) & 1 ? 1.0 : -1.0;
    double metric = 0.0;
    for (int k = 0; k < N; ++k) {
      double out = 0.0;
      for (size_t i = 0; i < f.size(); ++i) out += f[i] * x[k + m - i];
      metric += (y[k] - out) * (y[k] - out);
    }
    for (int k = 0; k < N; ++k) {
      const bool a = x[k + m] != x[k + m - 1];
      double& b = a ? best1[k] : best0[k];
      b = std::min(b, metric);
    }
  }
  std::vector<double> L(N);
  for (int k = 0; k < N; ++k) L[k] = (best0[k] - best1[k]) / (2.0 * sigma * sigma);
  return L;
}

}  // namespace

// ---- the trellis ----

TEST(Trellis, BranchOutputsAreTheTargetConvolution) {
  for (const auto& f : {kPR4, kEPR4, kE2PR4}) {
    Trellis t(f);
    EXPECT_EQ(t.memory(), static_cast<int>(f.size()) - 1);
    EXPECT_EQ(t.states(), 1 << t.memory());
    for (int j = 0; j < 2; ++j)
      for (int s = 0; s < t.states(); ++s) {
        const int w = t.branch_word(j, s);
        double y = 0.0;
        for (size_t i = 0; i < f.size(); ++i) y += f[i] * (((w >> i) & 1) ? 1.0 : -1.0);
        EXPECT_DOUBLE_EQ(t.output(j, s), y);
        EXPECT_EQ(t.distinct_outputs()[t.output_index(j, s)], y);
        EXPECT_EQ(t.nrzi(j, s), ((w & 1) ^ ((w >> 1) & 1)));
        // The predecessor holds the older levels of the same window.
        EXPECT_EQ(t.pred(j, s), (w >> 1) & (t.states() - 1));
      }
  }
  // PR4 outputs are ternary and EPR4 five-level (Kobayashi & Tang 1970; Thapar & Patel
  // 1987 [from memory]).
  EXPECT_EQ(Trellis(kPR4).distinct_outputs().size(), 3u);
  EXPECT_EQ(Trellis(kEPR4).distinct_outputs().size(), 5u);
  EXPECT_EQ(Trellis(std::vector<double>{1, 0, 0, 0, 0, -1}).states(), 32);
  EXPECT_EQ(Trellis(std::vector<double>{1}, 1).states(), 2);
  EXPECT_EQ(Trellis(kPR4, 4).states(), 16);
}

TEST(Trellis, RefusesBadTargets) {
  auto kind_of = [](auto&& fn) {
    try {
      fn();
    } catch (const salvor::Error& e) {
      return e.kind();
    }
    return salvor::ErrorKind::internal;
  };
  EXPECT_EQ(kind_of([] { Trellis(std::vector<double>{}); }), salvor::ErrorKind::usage);
  EXPECT_EQ(kind_of([] { Trellis(std::vector<double>(7, 1.0)); }), salvor::ErrorKind::usage);
  EXPECT_EQ(kind_of([] { Trellis(std::vector<double>{1, NAN}); }), salvor::ErrorKind::usage);
  EXPECT_EQ(kind_of([] { Trellis(std::vector<double>{0, 0}); }), salvor::ErrorKind::usage);
  EXPECT_EQ(kind_of([] { Trellis(kPR4, 6); }), salvor::ErrorKind::usage);
}

// Levels from NRZI with the 1/(1+D) precoder, and the EPR4 / dicode outputs: test vector
// of coding-and-formats.md §1.1 (computed there, [V]).
TEST(Trellis, PrecoderAndTargetTestVector) {
  const Bits a = {1, 0, 1, 1, 0, 0, 1, 0, 0, 0, 1, 1, 1, 0, 1, 0};
  const std::vector<int> nrzi_b = {1, 1, 0, 1, 1, 1, 0, 0, 0, 0, 1, 0, 1, 1, 0, 0};
  const std::vector<int> dicode = {2, 0, -2, 2, 0, 0, -2, 0, 0, 0, 2, -2, 2, 0, -2, 0};
  const auto x = levels_from_nrzi(a, -1.0);
  const auto y = pr_channel(x, std::vector<double>{1, -1}, -1.0);
  for (size_t k = 0; k < a.size(); ++k) {
    EXPECT_EQ(x[k], 2.0 * nrzi_b[k] - 1.0) << k;
    EXPECT_EQ(y[k], dicode[k]) << k;
  }
  // The x row of the PR4-precoded example through EPR4.
  const std::vector<double> x2 = {1, -1, -1, 1, -1, 1, 1, 1, 1, 1, -1, -1, 1, -1, -1, -1};
  const std::vector<int> epr4 = {2, 2, -2, 0, 2, 0, 2, 2, 0, 0, -2, -4, 0, 2, -2, -2};
  const auto y2 = pr_channel(x2, kEPR4, -1.0);
  for (size_t k = 0; k < x2.size(); ++k) EXPECT_EQ(y2[k], epr4[k]) << k;
}

// ---- error events and distances ----

// d2min with e in {0, +-1}: references §2 table (computed by exhaustive search there;
// agrees with Forney 1972 and the PRML literature, e.g. Thapar & Patel 1987 [from memory]).
TEST(TrellisErrorEvents, MinimumDistancesMatchPublishedTable) {
  EXPECT_DOUBLE_EQ(min_squared_distance(kPR4), 2.0);
  EXPECT_DOUBLE_EQ(min_squared_distance(kEPR4), 4.0);
  EXPECT_DOUBLE_EQ(min_squared_distance(kE2PR4), 6.0);
  EXPECT_DOUBLE_EQ(min_squared_distance(std::vector<double>{1, -1}), 2.0);        // dicode
  EXPECT_DOUBLE_EQ(min_squared_distance(std::vector<double>{1, 2, 1}), 4.0);      // PR2
  EXPECT_DOUBLE_EQ(min_squared_distance(std::vector<double>{1, 2, 2, 1}), 4.0);   // (1+D)^3
  EXPECT_DOUBLE_EQ(min_squared_distance(std::vector<double>{1, 2, 3, 2, 1}), 6.0);
  // The next distances of the same table.
  auto next_d2 = [](const std::vector<double>& f) {
    double d2min = min_squared_distance(f), next = INFINITY;
    for (const auto& ev : error_events(f, d2min + 4.0, 12))
      if (ev.d2 > d2min + 1e-9) next = std::min(next, ev.d2);
    return next;
  };
  EXPECT_DOUBLE_EQ(next_d2(kPR4), 4.0);
  EXPECT_DOUBLE_EQ(next_d2(kEPR4), 6.0);
  EXPECT_DOUBLE_EQ(next_d2(kE2PR4), 8.0);
}

// Union-bound multiplicities K = sum w(e) 2^-w(e): references §2 table (computed there).
// Events are enumerated up to length 48; the geometric tails (+0+0..+) are cut there,
// hence the 1e-5 tolerance.
TEST(TrellisErrorEvents, MultiplicitiesMatchPublishedTable) {
  EXPECT_NEAR(union_bound_multiplicity(kPR4, 48).level, 4.0, 1e-5);
  EXPECT_NEAR(union_bound_multiplicity(kEPR4, 48).level, 6.0, 1e-5);
  EXPECT_NEAR(union_bound_multiplicity(kE2PR4, 30).level, 0.75, 1e-9);
  EXPECT_NEAR(union_bound_multiplicity(std::vector<double>{1, -1}, 48).level, 4.0, 1e-5);
  EXPECT_NEAR(union_bound_multiplicity(std::vector<double>{1, 1}, 48).level, 4.0, 1e-5);
  EXPECT_NEAR(union_bound_multiplicity(std::vector<double>{1, 2, 1}, 30).level, 3.0, 1e-6);
  // E2PR4: only +-+ (and its negative) reach d2min (references §2).
  auto ev = error_events(kE2PR4, 6.0, 12);
  ASSERT_EQ(ev.size(), 2u);
  EXPECT_EQ(ev[0].e, (std::vector<int8_t>{1, -1, 1}));
  EXPECT_EQ(ev[0].nrzi_errors, 2);
  // In the NRZI domain each PR4 event +0+0..+ (n level errors) is 2n bit errors: K = 8.
  EXPECT_NEAR(union_bound_multiplicity(kPR4, 48).nrzi, 8.0, 1e-5);
}

TEST(TrellisErrorEvents, DijkstraAgreesWithEnumerationOnRandomTargets) {
  std::mt19937_64 rng(11);
  for (int trial = 0; trial < 20; ++trial) {
    const auto f = random_gpr(rng);
    const double d2 = min_squared_distance(f);
    double enumerated = INFINITY;
    for (const auto& ev : error_events(f, d2 + 1.0, 10)) enumerated = std::min(enumerated, ev.d2);
    EXPECT_NEAR(d2, enumerated, 1e-9);
    EXPECT_LE(d2, [&] { double e = 0; for (double v : f) e += v * v; return e; }() + 1e-12);
  }
}

// ---- Viterbi = exhaustive ML ----

namespace {
void expect_viterbi_is_ml(const std::vector<double>& f, int N, int trials, double sigma,
                          std::mt19937_64& rng, bool with_erasures,
                          SequenceDetectorConfig c = SequenceDetectorConfig{}) {
  c.traceback_depth = 8;  // window 16: blocks of 16 bits exercise the block traceback too
  c.reliability = false;
  c.noise_sigma = sigma;
  c.fixed_point = false;
  SequenceDetector det(f, c);
  // The fixed-point detector (Euclidean metric only) on the same blocks.
  SequenceDetectorConfig cq = c;
  cq.fixed_point = true;
  const bool with_fixed = c.kind == MetricKind::euclidean;
  SequenceDetector fixed(f, cq);
  const int m = det.trellis().memory();
  int differs_from_truth = 0;
  for (int t = 0; t < trials; ++t) {
    const Bits a = random_bits(N, rng);
    const auto x = levels_from_nrzi(a, (rng() & 1) ? 1.0 : -1.0);
    // Unknown levels before the block: random.
    std::vector<double> pre(6);
    for (auto& v : pre) v = (rng() & 1) ? 1.0 : -1.0;
    std::vector<double> y0(N);
    for (int k = 0; k < N; ++k) {
      double acc = 0.0;
      for (size_t i = 0; i < f.size(); ++i)
        acc += f[i] * (k >= static_cast<int>(i) ? x[k - i] : pre[i - k - 1]);
      y0[k] = acc;
    }
    const auto y = add_noise(y0, sigma, rng);
    std::vector<uint8_t> er;
    if (with_erasures) {
      er.assign(N, 0);
      er[rng() % N] = 1;
      er[rng() % N] = 1;
    }
    det.reset();
    const Decided d = run_detector(det, y, er);
    const Bits ml = exhaustive_ml(y, f, m, er);
    ASSERT_EQ(d.bits.size(), static_cast<size_t>(N));
    // Equal metrics always (the decision is a maximum-likelihood sequence); equal bits
    // unless an erasure leaves levels free (then several sequences tie).
    const double m_ml = metric_of_nrzi(y, f, m, er, ml);
    EXPECT_NEAR(metric_of_nrzi(y, f, m, er, d.bits), m_ml, 1e-6 * (1.0 + m_ml)) << "trial " << t;
    if (!with_erasures) {
      EXPECT_EQ(d.bits, ml) << "trial " << t;
    }
    if (with_fixed) {
      // Exactly optimal in its own quantized metric (integers: compared exactly; ties are
      // common there, so the bits may differ from the exhaustive search's choice).
      fixed.reset();
      const Decided q = run_detector(fixed, y, er);
      ASSERT_EQ(q.bits.size(), static_cast<size_t>(N));
      const BranchMetric qm = fixed_point_metric(y, f);
      const Bits qml = exhaustive_ml(y, f, m, er, qm);
      EXPECT_EQ(metric_of_nrzi(y, f, m, er, q.bits, qm), metric_of_nrzi(y, f, m, er, qml, qm))
          << "trial " << t;
      // And near-optimal in the float metric: per step the quantized metric times its unit
      // (16 / gain^2) is within 2 |e| / gain + 17 / gain^2 of e^2 (rounding of y and of
      // the output, and the floor of >> 4), for both paths.
      double largest = 0.0;
      for (double v : f) largest += std::abs(v);
      const double g = 85.0 / largest;
      double tol = 0.0;
      for (int k = 0; k < N; ++k) tol += 2.0 * (2.0 * (std::abs(y[k]) + largest) / g + 17.0 / (g * g));
      EXPECT_LE(metric_of_nrzi(y, f, m, er, q.bits), m_ml + tol) << "trial " << t;
    }
    // Skip bit 0, whose previous level the block cannot see when erased.
    for (int k = 1; k < N; ++k)
      if (ml[k] != a[k]) {
        ++differs_from_truth;
        break;
      }
  }
  // The noise is strong enough that ML often disagrees with the written data: the test
  // compares decisions, not two copies of the truth.
  EXPECT_GT(differs_from_truth, trials / 10);
}
}  // namespace

TEST(TrellisViterbiExhaustive, PR4) {
  std::mt19937_64 rng(1);
  expect_viterbi_is_ml(kPR4, 16, 150, 0.7, rng, false);
}
TEST(TrellisViterbiExhaustive, EPR4) {
  std::mt19937_64 rng(2);
  expect_viterbi_is_ml(kEPR4, 16, 120, 1.0, rng, false);
}
TEST(TrellisViterbiExhaustive, E2PR4) {
  std::mt19937_64 rng(3);
  expect_viterbi_is_ml(kE2PR4, 14, 100, 1.3, rng, false);
}
TEST(TrellisViterbiExhaustive, RandomGeneralizedTargets) {
  std::mt19937_64 rng(4);
  for (int t = 0; t < 12; ++t) {
    const auto f = random_gpr(rng);
    expect_viterbi_is_ml(f, 14, 25, 0.55 * std::sqrt(min_squared_distance(f)), rng, false);
  }
}
// An untrained pattern-dependent detector runs the Euclidean metric on a trellis larger
// than the target needs (pattern_length 5 on PR4: 16 states); still exactly ML.
TEST(TrellisViterbiExhaustive, ExtendedTrellisOfPatternDetector) {
  std::mt19937_64 rng(12);
  SequenceDetectorConfig c;
  c.kind = MetricKind::pattern_dependent;
  c.pattern_bits = 5;
  EXPECT_EQ(SequenceDetector(kPR4, c).trellis().states(), 16);
  expect_viterbi_is_ml(kPR4, 14, 80, 0.7, rng, false, c);
}
TEST(TrellisViterbiExhaustive, ErasedSamplesCarryNoInformation) {
  std::mt19937_64 rng(5);
  expect_viterbi_is_ml(kEPR4, 16, 100, 0.9, rng, true);
}

// ---- max-log-MAP = brute-force max-log; SOVA bounded by it ----

TEST(TrellisMaxLogMap, EqualsBruteForceMaxLogOnShortBlocks) {
  std::mt19937_64 rng(6);
  for (const auto& f : {kPR4, kEPR4, std::vector<double>{1, 0.6, -0.3, -0.2}}) {
    const double sigma = 0.8;
    MaxLogMapConfig c;
    c.block_length = 16;
    c.overlap = 0;
    c.noise_sigma = sigma;
    MaxLogMap det(f, c);
    const int m = det.trellis().memory();
    for (int t = 0; t < 30; ++t) {
      const int N = 11;
      const auto x = levels_from_nrzi(random_bits(N, rng));
      const auto y = add_noise(pr_channel(x, f), sigma, rng);
      det.reset();
      const Decided d = run_detector(det, y);
      const auto L = brute_force_maxlog(y, f, m, sigma);
      ASSERT_EQ(d.llr.size(), static_cast<size_t>(N));
      for (int k = 0; k < N; ++k) {
        EXPECT_NEAR(d.llr[k], std::clamp(L[k], -60.0, 60.0), 1e-4 * (1.0 + std::abs(L[k])))
            << "trial " << t << " bit " << k;
        if (std::abs(L[k]) > 1e-6) {
          EXPECT_EQ(d.bits[k], L[k] > 0 ? 1 : 0);
        }
      }
    }
  }
}

// Hagenauer-Hoeher SOVA takes the minimum over a subset of the competing paths that
// max-log-MAP minimises over, so |L_sova| >= |L_maxlog| (Fossorier, Burkert, Lin &
// Hagenauer, IEEE Commun. Lett. 2(5), 1998 [from memory]); its signs are the ML bits.
TEST(TrellisSova, ReliabilityIsAtLeastMaxLog) {
  std::mt19937_64 rng(7);
  const double sigma = 0.8;
  for (const auto& f : {kPR4, kEPR4}) {
    SequenceDetectorConfig c;
    c.traceback_depth = 16;
    c.reliability_window = 16;
    c.noise_sigma = sigma;
    c.fixed_point = false;  // the bound holds for exact metrics
    SequenceDetector det(f, c);
    for (int t = 0; t < 30; ++t) {
      const int N = 11;
      const auto y = add_noise(pr_channel(levels_from_nrzi(random_bits(N, rng)), f), sigma, rng);
      det.reset();
      const Decided d = run_detector(det, y);
      const auto L = brute_force_maxlog(y, f, det.trellis().memory(), sigma);
      for (int k = 0; k < N; ++k) {
        EXPECT_GE(std::abs(d.llr[k]), std::min(std::abs(L[k]), 60.0) - 1e-3) << t << " " << k;
        if (std::abs(L[k]) > 1e-6) {
          EXPECT_EQ(d.bits[k], L[k] > 0 ? 1 : 0);
        }
      }
    }
  }
}

// On long streams with sliding windows, max-log-MAP and Viterbi agree except where a
// decision is nearly a tie.
TEST(TrellisMaxLogMap, HardDecisionsEqualViterbiOnLongStreams) {
  std::mt19937_64 rng(8);
  const double sigma = 0.55;
  const size_t n = 40000;
  const auto a = random_bits(n, rng);
  const auto y = add_noise(pr_channel(levels_from_nrzi(a), kEPR4), sigma, rng);
  SequenceDetectorConfig vc;
  vc.traceback_depth = 96;
  vc.reliability = false;
  vc.fixed_point = false;  // both in float: they differ only at exact near-ties
  SequenceDetector vit(kEPR4, vc);
  MaxLogMapConfig mc;
  mc.block_length = 200;
  mc.overlap = 96;
  mc.noise_sigma = sigma;
  MaxLogMap map(kEPR4, mc);
  const Decided dv = run_detector(vit, y, {}, 333);
  const Decided dm = run_detector(map, y, {}, 333);
  ASSERT_EQ(dv.bits.size(), n);
  ASSERT_EQ(dm.bits.size(), n);
  size_t differ = 0, differ_not_tie = 0;
  for (size_t k = 0; k < n; ++k)
    if (dv.bits[k] != dm.bits[k]) {
      ++differ;
      differ_not_tie += std::abs(dm.llr[k]) > 1e-3;
    }
  EXPECT_EQ(differ_not_tie, 0u) << differ << " differing bits";
  // and the channel was noisy enough to make errors
  EXPECT_GT(count_errors(a, dv.bits, 16, 0).errors, 20u);
}

// Memoryless target [1]: the level LLR is 2y/sigma^2 (references §6 unit test, from the
// BCJR recursion with Gaussian noise). The NRZI bit a_k = [x_k != x_(k-1)] then has the
// max-log LLR -sign(L_k L_(k-1)) min(|L_k|, |L_(k-1)|) (the max-log "box-plus" of the two
// level LLRs, Hagenauer, Offer & Papke, IEEE Trans. IT 42(2), 1996 [from memory]); the
// first bit, whose previous level is unknown, has LLR 0.
// The fixed-point add-compare-select costs no measurable detection performance: on the
// same noisy streams it makes about as many bit errors as the float detector (the two
// differ only where quantization turns a near-tie). The 10 % + 10 margin is ours.
TEST(TrellisFixedPoint, BitErrorsMatchFloatOnLongStreams) {
  std::mt19937_64 rng(31);
  struct Case {
    std::vector<double> f;
    double sigma;
  };
  for (const Case& cs : {Case{kPR4, 0.5}, Case{kEPR4, 0.62}, Case{kE2PR4, 1.0}}) {
    const size_t n = 60000;
    const auto a = random_bits(n, rng);
    const auto y = add_noise(pr_channel(levels_from_nrzi(a), cs.f), cs.sigma, rng);
    SequenceDetectorConfig c;
    c.reliability = false;
    c.fixed_point = false;
    SequenceDetector flt(cs.f, c);
    c.fixed_point = true;
    SequenceDetector fix(cs.f, c);
    const size_t ef = count_errors(a, run_detector(flt, y, {}, 777).bits, 16, 0).errors;
    const size_t eq = count_errors(a, run_detector(fix, y, {}, 777).bits, 16, 0).errors;
    std::printf("  target of %zu taps: float %zu, fixed point %zu bit errors in %zu\n", cs.f.size(), ef, eq, n);
    EXPECT_GT(ef, 100u) << "the channel must be noisy enough to count errors";
    EXPECT_LE(static_cast<double>(eq), 1.1 * static_cast<double>(ef) + 10.0)
        << "float " << ef << " fixed " << eq;
  }
}

TEST(TrellisMaxLogMap, MemorylessTargetGivesTwoYOverSigmaSquared) {
  std::mt19937_64 rng(9);
  const double sigma = 0.8;
  const std::vector<double> f = {1.0};
  const auto a = random_bits(2000, rng);
  const auto y = add_noise(pr_channel(levels_from_nrzi(a), f), sigma, rng);
  for (int overlap : {0, 5}) {
    MaxLogMapConfig c;
    c.block_length = 16;
    c.overlap = overlap;
    c.noise_sigma = sigma;
    MaxLogMap det(f, c);
    const Decided d = run_detector(det, y, {}, 37);
    ASSERT_EQ(d.llr.size(), y.size());
    EXPECT_EQ(d.llr[0], 0.0f);
    for (size_t k = 1; k < y.size(); ++k) {
      const double l1 = 2.0 * y[k] / (sigma * sigma), l0 = 2.0 * y[k - 1] / (sigma * sigma);
      const double expect = -(l1 * l0 > 0 ? 1.0 : -1.0) * std::min(std::abs(l1), std::abs(l0));
      EXPECT_NEAR(d.llr[k], expect, 1e-4 * (1 + std::abs(expect))) << k;
    }
  }
}

// ---- noise models ----

// Yule-Walker for AR(1) and AR(2) autocorrelations (Box & Jenkins, "Time Series
// Analysis", ch. 3 [from memory]): r_i = rho^i gives p = (rho, 0, ..), s2 = 1 - rho^2;
// AR(2) with (a1, a2): r1 = a1/(1-a2), r2 = a1 r1 + a2, s2 = 1 - a1 r1 - a2 r2.
TEST(TrellisNoiseModel, LevinsonDurbinSolvesYuleWalker) {
  const double rho = 0.6;
  std::vector<double> r1 = {1, rho, rho * rho, rho * rho * rho};
  auto p1 = levinson_durbin(r1, 3);
  EXPECT_NEAR(p1.coef[0], rho, 1e-12);
  EXPECT_NEAR(p1.coef[1], 0.0, 1e-12);
  EXPECT_NEAR(p1.coef[2], 0.0, 1e-12);
  EXPECT_NEAR(p1.error_variance, 1 - rho * rho, 1e-12);
  const double a1 = 0.5, a2 = -0.3;
  const double r_1 = a1 / (1 - a2), r_2 = a1 * r_1 + a2, r_3 = a1 * r_2 + a2 * r_1;
  auto p2 = levinson_durbin(std::vector<double>{1, r_1, r_2, r_3}, 3);
  EXPECT_NEAR(p2.coef[0], a1, 1e-12);
  EXPECT_NEAR(p2.coef[1], a2, 1e-12);
  EXPECT_NEAR(p2.coef[2], 0.0, 1e-12);
  EXPECT_NEAR(p2.error_variance, 1 - a1 * r_1 - a2 * r_2, 1e-12);
}

TEST(TrellisNoiseModel, EstimatorsRecoverSimulatedModels) {
  std::mt19937_64 rng(10);
  std::normal_distribution<double> g(0.0, 1.0);
  // AR(2) noise.
  PredictorEstimator est(2);
  double n1 = 0, n2 = 0;
  for (int k = 0; k < 200000; ++k) {
    const double n = 0.5 * n1 - 0.3 * n2 + 0.4 * g(rng);
    if (k > 10) {
      const double past[2] = {n1, n2};
      est.add(n, past);
    }
    n2 = n1;
    n1 = n;
  }
  auto p = est.solve();
  EXPECT_NEAR(p.coef[0], 0.5, 0.01);
  EXPECT_NEAR(p.coef[1], -0.3, 0.01);
  EXPECT_NEAR(p.error_variance, 0.16, 0.005);
  // Two patterns with their own predictor, bias and variance.
  PatternPredictorEstimator pe(1, 1);
  double prev = 0;
  for (int k = 0; k < 100000; ++k) {
    const int c = static_cast<int>(rng() & 1);
    const double n = c ? 0.8 * prev + 0.3 + 0.5 * g(rng) : -0.2 * prev + 0.1 * g(rng);
    const double past[1] = {prev};
    pe.add(c, n, past);
    prev = n;
  }
  auto m = pe.solve(32);
  EXPECT_NEAR(m.coef[1], 0.8, 0.02);
  EXPECT_NEAR(m.bias[1], 0.3, 0.02);
  EXPECT_NEAR(m.variance[1], 0.25, 0.01);
  EXPECT_NEAR(m.coef[0], -0.2, 0.02);
  EXPECT_NEAR(m.bias[0], 0.0, 0.01);
  EXPECT_NEAR(m.variance[0], 0.01, 0.001);
}

// ---- configuration errors ----

TEST(TrellisConfig, RefusesBadConfigurations) {
  auto usage = [](SequenceDetectorConfig c, std::vector<double> f = kEPR4) {
    try {
      SequenceDetector d(f, c);
    } catch (const salvor::Error& e) {
      return e.kind() == salvor::ErrorKind::usage && std::string(e.what()).size() > 10;
    }
    return false;
  };
  SequenceDetectorConfig c;
  c.traceback_depth = 4;
  EXPECT_TRUE(usage(c));
  c = {};
  c.reliability_window = 65;
  EXPECT_TRUE(usage(c));
  c = {};
  c.kind = MetricKind::noise_predictive;
  c.predictor_order = 0;
  EXPECT_TRUE(usage(c));
  c = {};
  c.kind = MetricKind::pattern_dependent;
  c.pattern_bits = 7;
  EXPECT_TRUE(usage(c));
  c = {};
  c.noise_sigma = NAN;
  EXPECT_TRUE(usage(c));
  EXPECT_TRUE(usage({}, std::vector<double>(7, 0.5)));
  MaxLogMapConfig mc;
  mc.block_length = 8;
  EXPECT_THROW(MaxLogMap(kEPR4, mc), salvor::Error);
}

TEST(TrellisConfig, RefusesNonFiniteSamplesAndBadTraining) {
  SequenceDetectorConfig c;
  c.kind = MetricKind::noise_predictive;
  SequenceDetector d(kPR4, c);
  std::vector<float> y = {0.1f, NAN, 0.3f};
  std::vector<uint8_t> bits(600), erasure = {0, 1, 0};
  std::vector<float> llr(600);
  try {
    d.process(y, {}, bits, llr);
    ADD_FAILURE() << "NaN accepted";
  } catch (const salvor::Error& e) {
    EXPECT_EQ(e.kind(), salvor::ErrorKind::input);
    EXPECT_NE(std::string(e.what()).find("sample 1"), std::string::npos) << e.what();
  }
  // An erased NaN is not information and is accepted.
  EXPECT_EQ(d.process(y, erasure, bits, llr).consumed, 3u);
  std::vector<uint8_t> known = {0, 1};
  EXPECT_THROW(d.train(std::vector<float>{0.f, 1.f, 2.f}, known, -1), salvor::Error);
  EXPECT_THROW(d.train(std::vector<float>{0.f, 1.f}, known, 0), salvor::Error);
}

// train(): the noise is y - f*x from the known bits; an AR(1) noise n_k = rho n_(k-1) + w_k
// on a PR4 channel gives the predictor (rho, 0) and error variance var(w) (Yule-Walker,
// Box & Jenkins [from memory]).
TEST(TrellisTraining, NpmlLearnsTheNoisePredictor) {
  std::mt19937_64 rng(13);
  std::normal_distribution<double> g(0.0, 1.0);
  const Bits a = random_bits(100000, rng);
  auto y = pr_channel(levels_from_nrzi(a), kPR4);
  double n = 0.0;
  for (auto& v : y) {
    n = 0.7 * n + 0.2 * g(rng);
    v += n;
  }
  SequenceDetectorConfig c;
  c.kind = MetricKind::noise_predictive;
  c.predictor_order = 2;
  SequenceDetector det(kPR4, c);
  det.train(to_float(std::vector<double>(y.begin(), y.begin() + 50000)),
            std::span<const uint8_t>(a).first(50000), -1);
  det.train(to_float(std::vector<double>(y.begin() + 50000, y.end())),
            std::span<const uint8_t>(a).subspan(50000), levels_from_nrzi(a)[49999] > 0 ? 1 : -1);
  ASSERT_TRUE(det.trained());
  EXPECT_NEAR(det.predictor().coef[0], 0.7, 0.01);
  EXPECT_NEAR(det.predictor().coef[1], 0.0, 0.01);
  EXPECT_NEAR(det.predictor().error_variance, 0.04, 0.002);
}

// Pattern-dependent training: noise whose variance depends on whether the branch holds a
// transition (x_k != x_(k-1)) is learnt per pattern.
TEST(TrellisTraining, PdnpLearnsPatternVariances) {
  std::mt19937_64 rng(14);
  std::normal_distribution<double> g(0.0, 1.0);
  const Bits a = random_bits(100000, rng);
  const auto x = levels_from_nrzi(a);
  auto y = pr_channel(x, kPR4);
  for (size_t k = 0; k < y.size(); ++k) y[k] += (a[k] ? 0.3 : 0.1) * g(rng);
  SequenceDetectorConfig c;
  c.kind = MetricKind::pattern_dependent;
  c.pattern_bits = 2;
  c.predictor_order = 1;
  SequenceDetector det(kPR4, c);
  det.train(to_float(y), a, -1);
  const auto& m = det.pattern_model();
  ASSERT_EQ(m.variance.size(), 4u);
  for (int p = 0; p < 4; ++p) {
    const bool transition = (p & 1) != ((p >> 1) & 1);
    EXPECT_NEAR(m.variance[p], transition ? 0.09 : 0.01, transition ? 0.004 : 0.0005) << p;
    EXPECT_NEAR(m.coef[p], 0.0, 0.02) << p;
    EXPECT_NEAR(m.bias[p], 0.0, 0.005) << p;
  }
}

// With noise_sigma unknown the detectors estimate it from their decisions; the LLRs are
// then close to those computed with the true sigma.
TEST(TrellisNoiseEstimate, UnknownSigmaGivesNearlyTheSameLlrs) {
  std::mt19937_64 rng(15);
  const double sigma = 0.6;
  const auto y = add_noise(pr_channel(levels_from_nrzi(random_bits(20000, rng)), kEPR4), sigma, rng);
  MaxLogMapConfig known, unknown;
  known.noise_sigma = sigma;
  MaxLogMap a(kEPR4, known), b(kEPR4, unknown);
  const Decided da = run_detector(a, y), db = run_detector(b, y);
  SequenceDetectorConfig vk, vu;
  vk.noise_sigma = sigma;
  SequenceDetector c(kEPR4, vk), d(kEPR4, vu);
  const Decided dc = run_detector(c, y), dd = run_detector(d, y);
  double ratio_map = 0, ratio_sova = 0;
  size_t n = 0;
  for (size_t k = 2000; k < y.size(); ++k)
    if (std::abs(da.llr[k]) > 1.0 && std::abs(da.llr[k]) < 30.0 && std::abs(dc.llr[k]) > 1.0 &&
        std::abs(dc.llr[k]) < 30.0) {
      ratio_map += db.llr[k] / da.llr[k];
      ratio_sova += dd.llr[k] / dc.llr[k];
      ++n;
    }
  ASSERT_GT(n, 1000u);
  EXPECT_NEAR(ratio_map / n, 1.0, 0.05);
  EXPECT_NEAR(ratio_sova / n, 1.0, 0.05);
  EXPECT_EQ(da.bits, db.bits);  // max-log decisions do not depend on sigma
}

// A copy made mid-stream continues exactly as the original (DEVELOPERS.md: copy = clone).
TEST(TrellisConfig, CopyMidStreamContinuesIdentically) {
  std::mt19937_64 rng(16);
  const auto y = add_noise(pr_channel(levels_from_nrzi(random_bits(5000, rng)), kEPR4), 0.6, rng);
  const std::vector<float> first(y.begin(), y.begin() + 2345), rest(y.begin() + 2345, y.end());
  SequenceDetectorConfig c;
  c.kind = MetricKind::noise_predictive;
  c.adapt = true;
  c.adapt_min_samples = 500;
  SequenceDetector a(kEPR4, c);
  MaxLogMap m(kEPR4, MaxLogMapConfig{});
  run_detector(a, first);  // includes a flush; continue a second span below
  std::vector<uint8_t> bits(8000);
  std::vector<float> llr(8000);
  a.process(first, {}, bits, llr);
  m.process(first, {}, bits, llr);
  SequenceDetector b = a;
  MaxLogMap n = m;
  const Decided da = run_detector(a, rest), db = run_detector(b, rest);
  const Decided dm = run_detector(m, rest), dn = run_detector(n, rest);
  EXPECT_EQ(da.bits, db.bits);
  EXPECT_EQ(da.llr, db.llr);
  EXPECT_EQ(dm.bits, dn.bits);
  EXPECT_EQ(dm.llr, dn.llr);
  EXPECT_NE(a.describe().find("traceback 64 bits"), std::string::npos) << a.describe();
  EXPECT_NE(m.describe().find("block 256 bits"), std::string::npos) << m.describe();
}
