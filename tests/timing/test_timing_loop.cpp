#include <gtest/gtest.h>

#include <limits>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <vector>

#include "common/error.hpp"
#include "lorentzian_signal.hpp"
#include "timing/timing_loop.hpp"

using namespace salvor::timing;
using salvor::testsig::make_track;
using salvor::testsig::Track;
using salvor::testsig::TrackSpec;

namespace {

struct LoopRun {
  std::vector<BitSample> out;
  std::vector<LockEvent> events;
  TimingStats stats;
};

// Feeds the capture in chunks of `chunk` input samples with an output buffer of `out_cap`.
LoopRun run_loop(const TimingLoopConfig& cfg, const std::vector<float>& x, size_t chunk,
             size_t out_cap = 4096) {
  TimingLoop loop(cfg);
  LoopRun r;
  std::vector<BitSample> buf(out_cap);
  size_t pos = 0;
  while (pos < x.size()) {
    const size_t n = std::min(chunk, x.size() - pos);
    std::span<const float> in(x.data() + pos, n);
    while (!in.empty()) {
      auto p = loop.process(in, buf);
      r.out.insert(r.out.end(), buf.begin(), buf.begin() + p.produced);
      in = in.subspan(p.consumed);
      if (p.consumed == 0 && p.produced == 0) ADD_FAILURE() << "no progress";
    }
    pos += n;
  }
  // drain what the history still allows
  for (;;) {
    auto p = loop.process({}, buf);
    r.out.insert(r.out.end(), buf.begin(), buf.begin() + p.produced);
    if (p.produced == 0) break;
  }
  loop.drain_events(r.events);
  r.stats = loop.stats();
  return r;
}

TimingLoopConfig config_for(const TrackSpec& s) {
  TimingLoopConfig c;
  c.samples_per_bit = s.spb;
  c.pw50_bits = 2.0;  // deliberately not the true PW50: the loop must not need it exactly
  return c;
}

struct ErrorStats {
  double rms = 0, max_abs = 0, mean = 0;
  size_t n = 0;
};

// Timing error of the tracked outputs with positions in [from, to).
ErrorStats timing_errors(const Track& tr, const LoopRun& r, double from, double to) {
  ErrorStats e;
  double s2 = 0, s1 = 0;
  for (const auto& b : r.out) {
    if (b.state != TimingState::track || b.position < from || b.position >= to) continue;
    const double err = salvor::testsig::timing_error_bits(tr, b.position);
    s2 += err * err;
    s1 += err;
    e.max_abs = std::max(e.max_abs, std::fabs(err));
    ++e.n;
  }
  if (e.n) {
    e.rms = std::sqrt(s2 / e.n);
    e.mean = s1 / e.n;
  }
  return e;
}

// Cycle slips against the truth: the nearest true bit of consecutive tracked outputs must
// advance by exactly one; every other step is a lost or repeated bit.
int bit_discontinuities(const Track& tr, const LoopRun& r) {
  long prev = -1;
  int n = 0;
  for (const auto& b : r.out) {
    if (b.state != TimingState::track || b.position >= tr.bit_time.back()) {
      prev = -1;
      continue;
    }
    const long k = long(std::lower_bound(tr.bit_time.begin(), tr.bit_time.end(),
                                         b.position - 0.5 * tr.true_spb) - tr.bit_time.begin());
    if (prev >= 0 && k != prev + 1) ++n;
    prev = k;
  }
  return n;
}

double first_lock_position(const LoopRun& r) {
  for (const auto& e : r.events)
    if (e.locked) return e.position;
  return -1;
}

}  // namespace

// Speed offsets the loop must acquire within one 96-bit preamble (tf1's length), and the residual
// timing error after lock. The 5 % rms bound is the project's requirement at the demo
// SNR; the signal is this test's own Lorentzian stimulus (lorentzian_signal.hpp) at
// PW50 = 2.2 bits, 24 dB SNR (peak / rms in the channel-bit Nyquist band).
class SpeedOffset : public ::testing::TestWithParam<double> {};

TEST_P(SpeedOffset, LocksWithinPreambleAndTracks) {
  TrackSpec s;
  s.rate_offset = GetParam();
  s.seed = 11;
  const Track tr = make_track(s);
  const LoopRun r = run_loop(config_for(s), tr.samples, 1 << 30);
  const double lock_at = first_lock_position(r);
  ASSERT_GT(lock_at, 0) << "never locked";
  // locked before the first sync mark, i.e. within the preamble
  EXPECT_LT(lock_at, tr.bit_time[tr.sync_bit[0]]);
  EXPECT_GT(lock_at, tr.bit_time[tr.sync_bit[0] - 96]);
  const auto e = timing_errors(tr, r, lock_at, tr.bit_time.back());
  std::printf("offset %+.3f%%: lock at bit %.0f, rms %.4f, max %.4f bits, n %zu\n",
              100 * s.rate_offset, lock_at / tr.true_spb, e.rms, e.max_abs, e.n);
  EXPECT_GT(e.n, tr.bits.size() * 9 / 10);
  EXPECT_LT(e.rms, 0.05);
  EXPECT_LT(e.max_abs, 0.25);
  EXPECT_EQ(bit_discontinuities(tr, r), 0);
  EXPECT_EQ(r.stats.cycle_slips, 0u);
  EXPECT_EQ(r.stats.lock_losses, 0u);
  // frequency estimate: mean over tracked bits against the true offset (within 0.05 %)
  double sum = 0;
  size_t n = 0;
  for (const auto& b : r.out)
    if (b.state == TimingState::track) sum += b.rate_offset, ++n;
  EXPECT_NEAR(sum / n, s.rate_offset, 5e-4);
}

INSTANTIATE_TEST_SUITE_P(TimingLoop, SpeedOffset, ::testing::Values(-0.01, -0.003, 0.0, 0.005, 0.01));

TEST(TimingLoop, TracksSinusoidalSpeedDrift) {
  TrackSpec s;
  s.rate_offset = 0.002;
  s.drift_amplitude = 0.002;      // +-0.2 % speed wobble
  s.drift_period_bits = 30000;    // 9.5 bits of phase swing
  s.sectors = 15;
  s.seed = 5;
  const Track tr = make_track(s);
  const LoopRun r = run_loop(config_for(s), tr.samples, 4096);
  const double lock_at = first_lock_position(r);
  ASSERT_GT(lock_at, 0);
  EXPECT_LT(lock_at, tr.bit_time[tr.sync_bit[0]]);
  const auto e = timing_errors(tr, r, lock_at, tr.bit_time.back());
  std::printf("drift: rms %.4f max %.4f bits\n", e.rms, e.max_abs);
  EXPECT_LT(e.rms, 0.05);
  EXPECT_EQ(bit_discontinuities(tr, r), 0);
  EXPECT_EQ(r.stats.cycle_slips, 0u);
  EXPECT_EQ(r.stats.lock_losses, 0u);
}

TEST(TimingLoop, ZeroCycleSlipsOnCleanTrack) {
  TrackSpec s;
  s.snr_db = 40;
  s.sectors = 6;
  s.seed = 3;
  const Track tr = make_track(s);
  const LoopRun r = run_loop(config_for(s), tr.samples, 7777);
  EXPECT_EQ(bit_discontinuities(tr, r), 0);
  EXPECT_EQ(r.stats.cycle_slips, 0u);
  EXPECT_EQ(r.stats.lock_losses, 0u);
  EXPECT_EQ(r.stats.acquisitions, 1u);
  // every bit after lock is present exactly once: the nearest true bit of consecutive
  // tracked outputs advances by exactly one
  long prev = -1;
  size_t n = 0;
  for (const auto& b : r.out) {
    if (b.state != TimingState::track || b.position >= tr.bit_time.back()) continue;
    const long k = long(std::lower_bound(tr.bit_time.begin(), tr.bit_time.end(),
                                         b.position - 0.5 * tr.true_spb) - tr.bit_time.begin());
    if (prev >= 0) {
      ASSERT_EQ(k, prev + 1) << "bit lost or repeated at output " << n;
    }
    prev = k;
    ++n;
    EXPECT_LT(std::fabs(salvor::testsig::timing_error_bits(tr, b.position)), 0.1);
  }
  EXPECT_GT(n, tr.bits.size() * 9 / 10);
}

// A dropout (amplitude x0.01 for 400 bits) inside the data of sector 1: the loop loses
// lock, searches, and reacquires on the preamble of sector 2.
TEST(TimingLoop, ReacquiresAtNextPreambleAfterDropout) {
  TrackSpec s;
  s.sectors = 4;
  s.seed = 21;
  s.rate_offset = 0.004;
  TrackSpec probe = s;
  const Track layout = make_track(probe);
  const size_t d0 = layout.sync_bit[1] + 600;
  s.dropouts.push_back({d0, d0 + 400, 0.01});
  const Track tr = make_track(s);
  const LoopRun r = run_loop(config_for(s), tr.samples, 4096);
  ASSERT_GE(r.events.size(), 3u);
  EXPECT_TRUE(r.events[0].locked);
  // lock lost within the dropout
  const auto lost = std::find_if(r.events.begin(), r.events.end(), [](const LockEvent& e) { return !e.locked; });
  ASSERT_NE(lost, r.events.end());
  EXPECT_GT(lost->position, tr.bit_time[d0]);
  EXPECT_LT(lost->position, tr.bit_time[d0 + 400]);
  // locked again within the preamble of sector 2
  const auto again = std::find_if(lost, r.events.end(), [](const LockEvent& e) { return e.locked; });
  ASSERT_NE(again, r.events.end());
  EXPECT_GT(again->position, tr.bit_time[tr.sync_bit[2] - 96]);
  EXPECT_LT(again->position, tr.bit_time[tr.sync_bit[2]]);
  const auto e = timing_errors(tr, r, again->position, tr.bit_time.back());
  EXPECT_LT(e.rms, 0.05);
  EXPECT_EQ(r.stats.lock_losses, 1u);
}

// Chunking invariance: chunks of 1, 7, 4096 and the whole capture (and small output
// buffers) give bit-identical outputs.
TEST(TimingLoop, ChunkingInvariance) {
  TrackSpec s;
  s.sectors = 2;
  s.data_bits = 600;
  s.rate_offset = -0.004;
  const Track tr = make_track(s);
  const auto cfg = config_for(s);
  const LoopRun whole = run_loop(cfg, tr.samples, 1 << 30);
  ASSERT_GT(whole.out.size(), 1000u);
  for (auto [chunk, cap] : {std::pair<size_t, size_t>{1, 1}, {7, 3}, {4096, 4096}, {4096, 5}}) {
    const LoopRun r = run_loop(cfg, tr.samples, chunk, cap);
    ASSERT_EQ(r.out.size(), whole.out.size()) << chunk;
    for (size_t i = 0; i < r.out.size(); ++i) {
      ASSERT_EQ(r.out[i].value, whole.out[i].value) << chunk << " at " << i;
      ASSERT_EQ(r.out[i].midpoint, whole.out[i].midpoint);
      ASSERT_EQ(r.out[i].position, whole.out[i].position);
      ASSERT_EQ(r.out[i].state, whole.out[i].state);
    }
  }
}

// Midpoints are an output only: turning them off (as the decoder does) must leave every
// bit instant, value and state exactly as they were.
TEST(TimingLoop, MidpointsOffChangesNothingElse) {
  TrackSpec s;
  s.sectors = 3;
  s.data_bits = 800;
  s.rate_offset = 0.003;
  const Track tr = make_track(s);
  auto cfg = config_for(s);
  const LoopRun with = run_loop(cfg, tr.samples, 4096);
  cfg.midpoints = false;
  const LoopRun without = run_loop(cfg, tr.samples, 4096);
  ASSERT_GT(with.out.size(), 2000u);
  ASSERT_EQ(without.out.size(), with.out.size());
  size_t nonzero = 0;
  for (size_t i = 0; i < with.out.size(); ++i) {
    ASSERT_EQ(without.out[i].value, with.out[i].value) << i;
    ASSERT_EQ(without.out[i].position, with.out[i].position) << i;
    ASSERT_EQ(without.out[i].state, with.out[i].state) << i;
    ASSERT_EQ(without.out[i].midpoint, 0.0f) << i;
    nonzero += with.out[i].midpoint != 0.0f;
  }
  EXPECT_GT(nonzero, with.out.size() / 2);  // the default does interpolate them
}

TEST(TimingLoop, CopyMidStreamAndResetAgree) {
  TrackSpec s;
  s.sectors = 2;
  s.data_bits = 500;
  const Track tr = make_track(s);
  TimingLoop a(config_for(s));
  std::vector<BitSample> buf(1 << 16), buf2(1 << 16);
  const size_t half = tr.samples.size() / 2;
  auto p = a.process(std::span<const float>(tr.samples.data(), half), buf);
  ASSERT_EQ(p.consumed, half);
  TimingLoop b = a;  // clone mid-stream
  std::span<const float> rest(tr.samples.data() + half, tr.samples.size() - half);
  auto pa = a.process(rest, buf);
  auto pb = b.process(rest, buf2);
  ASSERT_EQ(pa.produced, pb.produced);
  for (size_t i = 0; i < pa.produced; ++i) ASSERT_EQ(buf[i].value, buf2[i].value);
  // reset = a fresh object
  a.reset();
  TimingLoop c(config_for(s));
  pa = a.process(tr.samples, buf);
  pb = c.process(tr.samples, buf2);
  ASSERT_EQ(pa.produced, pb.produced);
  for (size_t i = 0; i < pa.produced; ++i) ASSERT_EQ(buf[i].position, buf2[i].position);
}

TEST(TimingLoop, RejectsBadConfigurationAndInput) {
  TimingLoopConfig c;
  c.samples_per_bit = 1.5;
  EXPECT_THROW(TimingLoop{c}, salvor::Error);
  c = {};
  c.detect_window = 30;
  EXPECT_THROW(TimingLoop{c}, salvor::Error);
  c = {};
  c.track_bandwidth = 0.05;  // wider than acquisition
  EXPECT_THROW(TimingLoop{c}, salvor::Error);
  c = {};
  c.prefilter_taps = 10;
  EXPECT_THROW(TimingLoop{c}, salvor::Error);
  c = {};
  c.pw50_bits = -1;
  EXPECT_THROW(TimingLoop{c}, salvor::Error);
  TimingLoop ok{TimingLoopConfig{}};
  const float inf = std::numeric_limits<float>::infinity();
  for (const float v : {std::nanf(""), inf, -inf}) {
    std::vector<float> bad = {0.1f, 0.2f, v, 0.3f};
    std::vector<BitSample> out(8);
    try {
      ok.process(bad, out);
      FAIL() << v << " accepted";
    } catch (const salvor::Error& e) {
      EXPECT_EQ(e.kind(), salvor::ErrorKind::input);
      EXPECT_NE(std::string(e.what()).find("non-finite sample at input index 2"), std::string::npos) << e.what();
    }
    ok.reset();
  }
  // The largest finite values are samples like any other.
  std::vector<float> big = {std::numeric_limits<float>::max(), -std::numeric_limits<float>::max(), 0.0f};
  std::vector<BitSample> out(8);
  EXPECT_EQ(ok.process(big, out).consumed, big.size());
  EXPECT_FALSE(ok.describe().empty());
}
