// Segments of the Viterbi detector (SequenceDetectorConfig::parallel_segments, see
// trellis/sequence_detector.hpp): bit for bit against a direct computation of the same
// sliding-block scheme from the scalar kernels, against one trellis over the span, and the
// held-back limit when the caller gives little output room.
#include <gtest/gtest.h>

#include <algorithm>
#include <bit>
#include <cmath>
#include <cstdio>
#include <limits>
#include <random>

#include "channel_sim.hpp"
#include "run_detector.hpp"
#include "trellis/kernels.hpp"
#include "trellis/sequence_detector.hpp"
#include "trellis/trellis.hpp"

using namespace salvor::trellis;
using namespace trellis_test;

namespace {

const std::vector<double> kEPR4 = {1, 1, -1, -1};
const std::vector<double> kE2PR4 = {1, 2, 0, -2, -1};
constexpr size_t H = SequenceDetector::kSegmentHalf;

size_t lookahead(const SequenceDetectorConfig& c, int memory) {
  const size_t period = fixed_dual_period(memory);
  return (static_cast<size_t>(c.traceback_depth) + period - 1) / period * period;
}

// The scheme written out plainly, one segment at a time, from the scalar kernels and plain
// arrays (no ring, no side buffers, no second lane): segment j covers the span's steps
// [2Hj, 2Hj + 2H). Its trellis starts with all metrics equal W steps before it (at the
// span start for j = 0); if the span holds 3H steps past the segment's start, the segment
// is a pass: its survivor is traced from the best state W steps past its end and 2H bits
// are released. Otherwise it is the last and runs to the end of the span. SOVA as the
// detector does it, with a known sigma (LLR = Delta / (2 sigma^2)).
Decided direct_segments(const std::vector<double>& f, const SequenceDetectorConfig& c,
                        const std::vector<float>& y, const std::vector<uint8_t>& erasure) {
  const Trellis tr(f);
  const int m = tr.memory(), S = tr.states();
  const FixedAcsTables t = make_fixed_acs(m, tr.output_row(0), tr.output_row(1));
  const size_t W = lookahead(c, m), N = y.size();
  std::vector<float> ys(y);
  std::vector<uint8_t> er(N, 0);
  for (size_t i = 0; i < N && !erasure.empty(); ++i)
    if (erasure[i]) {
      ys[i] = 0.0f;
      er[i] = 1;
    }
  std::vector<int16_t> yq(N);
  quantize_samples_scalar(t, ys.data(), N, yq.data());
  const double scale = 0.5 / (c.noise_sigma * c.noise_sigma);
  const float inf = std::numeric_limits<float>::infinity(), cap = SequenceDetector::kLlrCap;
  Decided out;
  for (size_t s = 0; s < N; s += 2 * H) {
    const bool pass = s + 3 * H <= N;
    const size_t t0 = s ? s - W : 0, t1 = pass ? s + 2 * H + W : N;
    const size_t emit = pass ? 2 * H : N - s, n = t1 - t0;
    std::vector<uint16_t> pm(S, 0), delta(static_cast<size_t>(S) * n);
    std::vector<uint64_t> dec(n);
    viterbi_fixed_scalar(t, pm.data(), t0, yq.data() + t0, er.data() + t0, n, dec.data(), delta.data());
    const int best = static_cast<int>(std::min_element(pm.begin(), pm.end()) - pm.begin());
    std::vector<uint64_t> levels((n + m + 63) / 64 + 1, 0);
    trace_levels(dec.data(), n, m, best, levels.data());
    auto level = [&](size_t i) { return static_cast<int>((levels[i / 64] >> (i % 64)) & 1); };
    // The survivor from the segment's first step on: state, branch, NRZI bit, decisions.
    const size_t steps = t1 - s;
    std::vector<uint8_t> state(steps), branch(steps), bit(steps);
    std::vector<uint32_t> decisions(steps);
    for (size_t u = 0; u < steps; ++u) {
      const size_t k = s - t0 + u;  // index in this trellis
      int st = 0;
      for (int i = 0; i < m; ++i) st |= level(k + 1 + i) << (m - 1 - i);
      state[u] = static_cast<uint8_t>(st);
      branch[u] = static_cast<uint8_t>(level(k));
      bit[u] = static_cast<uint8_t>(level(k + m) ^ level(k + m - 1));
      decisions[u] = state_ordered_decisions(dec[k], m);
    }
    std::vector<float> rel(steps, inf), merge(steps, inf);
    if (c.reliability) {
      const size_t U = static_cast<size_t>(c.reliability_window), last = std::min(steps, emit + U - 1);
      for (size_t u = 0; u < last; ++u) {
        const size_t k = s - t0 + u;
        const int lane = fixed_lane_of(state[u], static_cast<int>((s + u) % static_cast<size_t>(m)), m);
        const float d = static_cast<float>(delta[k * S + lane]) * t.metric_unit;
        merge[u] = static_cast<double>(d) * scale >= cap ? inf : d;
      }
      const SovaPath path{m, decisions.data(), state.data(), branch.data(), bit.data(), merge.data()};
      sova_scalar(path, last, U, rel.data());
    }
    const double fixed = std::min<double>(cap, 2.0 * min_squared_distance(f) / (c.noise_sigma * c.noise_sigma));
    for (size_t u = 0; u < emit; ++u) {
      out.bits.push_back(bit[u]);
      const float mag = c.reliability ? std::min(rel[u] * static_cast<float>(scale), cap)
                                      : static_cast<float>(fixed);
      out.llr.push_back(bit[u] ? mag : -mag);
    }
    if (!pass) break;  // the last segment ran to the end of the span
  }
  return out;
}

// Random chunks, with exactly the output room the plugin glue guarantees (the chunk plus
// what is held back); the held-back limit is checked after every call.
Decided feed_in_chunks(SequenceDetector& det, const std::vector<float>& y,
                       const std::vector<uint8_t>& erasure, size_t max_chunk, std::mt19937_64& rng) {
  Decided out;
  for (size_t pos = 0; pos < y.size();) {
    const size_t n = std::min<size_t>(1 + rng() % max_chunk, y.size() - pos);
    std::vector<uint8_t> bits(n + det.held_back());
    std::vector<float> llr(bits.size());
    std::span<const uint8_t> er;
    if (!erasure.empty()) er = std::span<const uint8_t>(erasure).subspan(pos, n);
    const auto p = det.process(std::span<const float>(y).subspan(pos, n), er, bits, llr);
    EXPECT_EQ(p.consumed, n);
    EXPECT_LE(det.held_back(), det.max_held_back());
    out.bits.insert(out.bits.end(), bits.begin(), bits.begin() + static_cast<long>(p.produced));
    out.llr.insert(out.llr.end(), llr.begin(), llr.begin() + static_cast<long>(p.produced));
    if (p.consumed == 0) break;
    pos += p.consumed;
  }
  std::vector<uint8_t> bits(det.held_back());
  std::vector<float> llr(bits.size());
  const size_t k = det.flush(bits, llr);
  out.bits.insert(out.bits.end(), bits.begin(), bits.begin() + static_cast<long>(k));
  out.llr.insert(out.llr.end(), llr.begin(), llr.begin() + static_cast<long>(k));
  return out;
}

bool same_llr_bits(const std::vector<float>& a, const std::vector<float>& b) {
  if (a.size() != b.size()) return false;
  for (size_t i = 0; i < a.size(); ++i)
    if (std::bit_cast<uint32_t>(a[i]) != std::bit_cast<uint32_t>(b[i])) return false;
  return true;
}

}  // namespace

// The detector's segments (ring, two lanes, side buffers, split traceback, flush) give
// exactly the bits and LLRs of the plain computation, for 8 and 16 states, traceback
// depths on and off the phase period (8 at 16 states, 24 at 8) up to the largest, SOVA
// on and off with random windows, SIMD and scalar kernels, bursts of erasures, clamped
// samples, spans just around the lengths where passes begin, and chunks from 1 to 5000.
TEST(TrellisSegments, EqualsADirectComputationOfTheScheme) {
  std::mt19937_64 rng(2026);
  const int depths[] = {8, 9, 16, 23, 24, 25, 40, 64, 100, 129, 200, 256};
  size_t passes_seen = 0;
  for (int trial = 0; trial < 200; ++trial) {
    const bool sixteen = trial % 2 != 0;
    const auto& f = sixteen ? kE2PR4 : kEPR4;
    SequenceDetectorConfig c;
    c.traceback_depth = depths[rng() % std::size(depths)];
    c.reliability = rng() % 3 != 0;
    c.reliability_window = 1 + static_cast<int>(rng() % static_cast<size_t>(c.traceback_depth));
    c.noise_sigma = sixteen ? 1.1 : 0.75;  // raw error rates of a few percent: many near-ties
    c.simd = rng() % 4 != 0;
    const size_t W = lookahead(c, sixteen ? 4 : 3);
    const size_t near[] = {3 * H, 5 * H, 7 * H, 3 * H + W, 5 * H + W, 4 * H, 2 * H + W};
    const size_t N = rng() % 2 ? near[rng() % std::size(near)] + rng() % 5 - 2 : 1 + rng() % 9000;
    const auto a = random_bits(N, rng);
    auto y = add_noise(pr_channel(levels_from_nrzi(a), f), c.noise_sigma, rng);
    for (auto& v : y)
      if (rng() % 500 == 0) v *= 4.0f;  // beyond the quantizer's clamp
    std::vector<uint8_t> er;
    if (rng() % 2) {
      er.assign(N, 0);
      for (size_t i = 0; i < N; ++i)
        if (rng() % 200 == 0)
          for (size_t k = i; k < std::min(N, i + 1 + rng() % 30); ++k) er[k] = 1;
    }
    SequenceDetector det(f, c);
    const size_t max_chunk = rng() % 3 == 0 ? 5 : rng() % 2 ? 700 : 5000;
    const Decided got = feed_in_chunks(det, y, er, max_chunk, rng);
    const Decided want = direct_segments(f, c, y, er);
    ASSERT_EQ(got.bits.size(), N) << "trial " << trial;
    EXPECT_EQ(got.bits, want.bits) << "trial " << trial << ": " << (sixteen ? 16 : 8) << " states, depth "
                                   << c.traceback_depth << ", " << N << " samples";
    EXPECT_TRUE(same_llr_bits(got.llr, want.llr)) << "trial " << trial;
    passes_seen += N >= 3 * H ? (N - H) / (2 * H) : 0;
  }
  EXPECT_GT(passes_seen, 200u);  // the test runs through many passes, not only short spans
}

// With less output room than a pass releases, process() stops one sample short of the
// pass: never more than max_held_back() held, flush() then fits in that room, and once
// the room is given the output is the same as with room all along (the cuts do not move).
TEST(TrellisSegments, LittleOutputRoomHoldsBackAtMostTheLimit) {
  std::mt19937_64 rng(5);
  for (const auto& f : {kEPR4, kE2PR4}) {
    SequenceDetectorConfig c;
    c.noise_sigma = 1.0;
    const auto a = random_bits(6 * H, rng);
    const auto y = add_noise(pr_channel(levels_from_nrzi(a), f), 1.0, rng);
    SequenceDetector starved(f, c), fed(f, c);
    std::vector<uint8_t> none_bits;
    std::vector<float> none_llr;
    const auto p = starved.process(y, {}, none_bits, none_llr);
    EXPECT_EQ(p.produced, 0u);
    EXPECT_EQ(p.consumed, 3 * H - 1);
    EXPECT_EQ(starved.held_back(), starved.max_held_back());
    const std::vector<float> rest(y.begin() + static_cast<long>(p.consumed), y.end());
    Decided a1;
    a1.bits.resize(y.size());
    a1.llr.resize(y.size());
    const auto p2 = starved.process(rest, {}, a1.bits, a1.llr);
    EXPECT_EQ(p2.consumed, rest.size());
    const size_t k = starved.flush(std::span<uint8_t>(a1.bits).subspan(p2.produced),
                                   std::span<float>(a1.llr).subspan(p2.produced));
    EXPECT_EQ(p2.produced + k, y.size());
    const Decided a2 = run_detector(fed, y, {}, 0);
    EXPECT_EQ(a1.bits, a2.bits);
    EXPECT_TRUE(same_llr_bits(a1.llr, a2.llr));
    // Flush after the starved call fits in max_held_back() room.
    SequenceDetector again(f, c);
    again.process(y, {}, none_bits, none_llr);
    std::vector<uint8_t> room(again.max_held_back());
    std::vector<float> room_llr(room.size());
    EXPECT_EQ(again.flush(room, room_llr), again.max_held_back());
  }
}

// The two-lane kernel refuses deltas for one lane only.
TEST(TrellisSegments, DualKernelRefusesDeltaForOneLaneOnly) {
  const Trellis tr(kE2PR4);
  const FixedAcsTables t = make_fixed_acs(tr.memory(), tr.output_row(0), tr.output_row(1));
  std::vector<uint16_t> pm_a(16), pm_b(16), delta(16 * 8);
  std::vector<int16_t> yq(8, 0);
  std::vector<uint64_t> dec_a(8), dec_b(8);
  const FixedLane a{pm_a.data(), yq.data(), nullptr, dec_a.data(), delta.data()};
  const FixedLane b{pm_b.data(), yq.data(), nullptr, dec_b.data(), nullptr};
  EXPECT_THROW(viterbi_fixed_dual_simd(t, 0, 8, a, b), std::invalid_argument);
  EXPECT_THROW(viterbi_fixed_dual_scalar(t, 0, 8, a, b), std::invalid_argument);
}

// Segments (parallel_segments, the default at 8 and 16 states) against one trellis over
// the whole span. Each segment starts fresh W steps early (W: traceback_depth rounded up
// to the phase period) and is traced back from as far past its end, so the two may differ
// only where survivors had not merged within that many steps: rare at these error rates,
// and no more errors on average. Long noisy streams at raw error rates of about 5e-3 to
// 6e-2, with and without erasures, SOVA on and off, depths 64 and 40. The
// margins (10 % + 10 errors; 0.1 % of the bits differing) are ours.
TEST(TrellisSegments, SameErrorRateAsOneTrellisOverTheSpan) {
  std::mt19937_64 rng(41);
  struct Case {
    std::vector<double> f;
    double sigma;
  };
  for (const Case& cs : {Case{kEPR4, 0.62}, Case{kE2PR4, 1.0}, Case{kEPR4, 0.8}, Case{kE2PR4, 1.3}}) {
    const size_t n = 120000;
    const auto a = random_bits(n, rng);
    const auto y = add_noise(pr_channel(levels_from_nrzi(a), cs.f), cs.sigma, rng);
    std::vector<uint8_t> erased(n, 0);
    for (auto& e : erased) e = rng() % 100 == 0;
    for (int variant = 0; variant < 3; ++variant) {
      SequenceDetectorConfig c;
      c.reliability = variant == 2;
      c.traceback_depth = variant == 1 ? 40 : 64;  // 40: W rounds up to the phase period
      c.parallel_segments = false;
      SequenceDetector one(cs.f, c);
      c.parallel_segments = true;
      SequenceDetector seg(cs.f, c);
      EXPECT_NE(seg.describe().find("segments"), std::string::npos);
      EXPECT_EQ(one.describe().find("segments"), std::string::npos);
      const std::vector<uint8_t> no_erasures;
      const auto& er = variant == 1 ? erased : no_erasures;
      const Decided d1 = run_detector(one, y, er, 1000), ds = run_detector(seg, y, er, 777);
      ASSERT_EQ(ds.bits.size(), n);
      const size_t e1 = count_errors(a, d1.bits, 16, 0).errors;
      const size_t es = count_errors(a, ds.bits, 16, 0).errors;
      size_t differ = 0;
      for (size_t k = 0; k < n; ++k) differ += d1.bits[k] != ds.bits[k];
      std::printf("  %zu states, variant %d: one trellis %zu, segments %zu bit errors in %zu; %zu bits differ\n",
                  size_t{1} << (cs.f.size() - 1), variant, e1, es, n, differ);
      EXPECT_GT(e1, 100u) << "the channel must be noisy enough to count errors";
      EXPECT_LE(static_cast<double>(es), 1.1 * static_cast<double>(e1) + 10.0) << "one " << e1 << " segments " << es;
      EXPECT_LE(differ, n / 1000);
      if (c.reliability) {  // the reliabilities still order the errors: errors sit at low |LLR|
        double err_mag = 0.0, all_mag = 0.0;
        for (size_t k = 0; k < n; ++k) {
          all_mag += std::abs(ds.llr[k]);
          if (ds.bits[k] != a[k]) err_mag += std::abs(ds.llr[k]);
        }
        EXPECT_LT(err_mag / static_cast<double>(es), 0.5 * all_mag / static_cast<double>(n));
      }
    }
  }
}

// Spans shorter than what one pass needs never leave the single trellis: exactly the bits
// and LLRs of one trellis over the span (and so maximum likelihood, as the exhaustive
// tests above check), whatever the chunking. With a known sigma, so that the LLR scale
// does not depend on when bits are released (an estimated one grows with each release).
TEST(TrellisSegments, ShortSpansAreOneTrellisExactly) {
  std::mt19937_64 rng(43);
  for (const auto& f : {kEPR4, kE2PR4}) {
    const size_t n = 3 * SequenceDetector::kSegmentHalf - 1;
    const auto a = random_bits(n, rng);
    const auto y = add_noise(pr_channel(levels_from_nrzi(a), f), 0.8, rng);
    SequenceDetectorConfig c;
    c.noise_sigma = 0.8;
    c.parallel_segments = false;
    SequenceDetector one(f, c);
    c.parallel_segments = true;
    SequenceDetector seg(f, c);
    const Decided d1 = run_detector(one, y, {}, 0), ds = run_detector(seg, y, {}, 100);
    EXPECT_EQ(d1.bits, ds.bits);
    EXPECT_EQ(d1.llr, ds.llr);
    EXPECT_EQ(seg.max_held_back(), SequenceDetector::kMaxHeldBack);
  }
}

