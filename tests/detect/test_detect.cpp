// Tests of core/detect (the plugin host and the Detector wrapper) and of the shipped
// detectors template, peak and dfe run through the host on synthetic channels.

#include <gtest/gtest.h>
#include <unistd.h>

#include <algorithm>
#include <cmath>
#include <filesystem>
#include <fstream>
#include <random>
#include <string>
#include <vector>

#include "../equalize/lorentzian_channel.hpp"
#include "common/error.hpp"
#include "detect/detector.hpp"
#include "detect/plugin_host.hpp"
#include "equalize/equalizer.hpp"
#include "equalize/mmse_target.hpp"

namespace fs = std::filesystem;
using namespace salvor::detect;
using salvor::testing::convolve_levels;
using salvor::testing::lorentzian_bit_response;
using salvor::testing::nrzi_bits;
using salvor::testing::random_levels;

namespace {

const fs::path kBuildPlugins = SALVOR_PLUGIN_BUILD_DIR;
const fs::path kFixtures = SALVOR_TEST_PLUGIN_DIR;

// A folder of our own holding a text file that pretends to be a plugin.
fs::path text_plugin_dir() {
  const fs::path dir = fs::temp_directory_path() / ("salvor-test-detect-" + std::to_string(::getpid()));
  fs::create_directories(dir);
  std::ofstream(dir / "x.so") << "this is a text file, not a shared library\n";
  std::ofstream(dir / "notes.txt") << "ignored: not a .so\n";
  return dir;
}

const PluginRecord* record_for(const PluginHost& host, const std::string& file_name) {
  for (const auto& r : host.records())
    if (r.path.filename() == file_name) return &r;
  return nullptr;
}

PluginHost shipped_host() { return PluginHost({kBuildPlugins}); }

struct Detected {
  std::vector<uint8_t> bits;
  std::vector<float> llr;
};

// Feeds `x` in chunks of `chunk` through the detector and flushes.
Detected detect_all(Detector& det, const std::vector<float>& x, size_t chunk, const std::vector<uint8_t>& erasure = {}) {
  Detected r;
  std::vector<uint8_t> bits(det.capacity_for(chunk));
  std::vector<float> llr(bits.size());
  for (size_t i = 0; i < x.size(); i += chunk) {
    const size_t n = std::min(chunk, x.size() - i);
    const std::span<const uint8_t> er = erasure.empty() ? std::span<const uint8_t>() : std::span(erasure).subspan(i, n);
    const size_t got = det.process(std::span(x).subspan(i, n), er, bits, llr);
    r.bits.insert(r.bits.end(), bits.begin(), bits.begin() + got);
    r.llr.insert(r.llr.end(), llr.begin(), llr.begin() + got);
  }
  const size_t got = det.flush(bits, llr);
  r.bits.insert(r.bits.end(), bits.begin(), bits.begin() + got);
  r.llr.insert(r.llr.end(), llr.begin(), llr.begin() + got);
  return r;
}

size_t bit_errors(const std::vector<uint8_t>& got, const std::vector<uint8_t>& want, size_t skip = 0) {
  size_t e = 0;
  for (size_t i = skip; i < want.size(); ++i) e += (i >= got.size() || got[i] != want[i]) ? 1 : 0;
  return e;
}

void expect_llr_signs_agree(const Detected& r) {
  for (size_t i = 0; i < r.bits.size(); ++i) {
    ASSERT_TRUE(r.bits[i] ? r.llr[i] >= 0.0f : r.llr[i] <= 0.0f) << "bit " << i;
  }
}

// Ideal PR channel output y = (f * a) + white noise.
std::vector<float> pr_signal(const std::vector<double>& f, const std::vector<int8_t>& a, double sigma, uint32_t seed) {
  return convolve_levels(f, a, sigma, seed);
}

}  // namespace

TEST(PluginSearchPath, EnvironmentFirstThenBuildThenInstall) {
  const auto p = plugin_search_path("/a:/b/c::rel", "/build/p", "/usr/lib/p");
  ASSERT_EQ(p.size(), 5u);
  EXPECT_EQ(p[0], "/a");
  EXPECT_EQ(p[1], "/b/c");
  EXPECT_EQ(p[2], "rel");  // kept, so the host refuses it visibly
  EXPECT_EQ(p[3], "/build/p");
  EXPECT_EQ(p[4], "/usr/lib/p");
  EXPECT_EQ(plugin_search_path(nullptr, "/b", "/i").size(), 2u);
}

TEST(PluginHost, LoadsTheShippedDetectors) {
  const PluginHost host = shipped_host();
  for (const char* name : {"template", "peak", "dfe"}) {
    const DetectorInfo* d = host.find(name);
    ASSERT_NE(d, nullptr) << name;
    EXPECT_EQ(d->path.parent_path(), kBuildPlugins);
    EXPECT_FALSE(d->version.empty());
  }
  EXPECT_EQ(host.find("template")->target, "dicode");
  EXPECT_EQ(host.find("peak")->target, "none");
  EXPECT_EQ(host.find("dfe")->target, "PR4");
  EXPECT_TRUE(host.find("dfe")->can_train);
  EXPECT_FALSE(host.find("template")->can_train);
}

// Each broken fixture is refused with its own clear reason; the good ones load beside them.
TEST(PluginHost, RefusesBadPluginsAndKeepsLoadingTheOthers) {
  const fs::path text_dir = text_plugin_dir();
  const PluginHost host({kBuildPlugins, kFixtures, text_dir});
  ASSERT_NE(host.find("testgood"), nullptr);  // next to the broken ones
  ASSERT_NE(host.find("template"), nullptr);
  EXPECT_EQ(host.find("template")->path.parent_path(), kBuildPlugins);  // the first owner wins

  auto reason = [&](const std::string& file) {
    const PluginRecord* r = record_for(host, file);
    EXPECT_NE(r, nullptr) << file;
    if (!r) return std::string();
    EXPECT_FALSE(r->loaded) << file;
    return r->reason;
  };
  const std::string version = reason("bad-version.so");
  EXPECT_NE(version.find("version 7"), std::string::npos) << version;  // names both versions
  EXPECT_NE(version.find("version 1"), std::string::npos) << version;
  EXPECT_NE(reason("small-struct.so").find("16 bytes"), std::string::npos);
  EXPECT_NE(reason("no-entry.so").find("not a salvor detector plugin"), std::string::npos);
  EXPECT_NE(reason("no-entry.so").find("salvor_detector_entry"), std::string::npos);
  EXPECT_NE(reason("x.so").find("not a salvor detector plugin"), std::string::npos);
  EXPECT_NE(reason("null-table.so").find("no table"), std::string::npos);
  const std::string dup = reason("duplicate-template.so");
  EXPECT_NE(dup.find("'template'"), std::string::npos) << dup;
  EXPECT_NE(dup.find((kBuildPlugins / "template.so").string()), std::string::npos) << dup;  // the first owner
  EXPECT_NE(reason("missing-process.so").find("'process'"), std::string::npos);
  EXPECT_NE(reason("bad-param.so").find("'broken'"), std::string::npos);
  EXPECT_NE(reason("bad-target.so").find("PR9"), std::string::npos);
  EXPECT_EQ(record_for(host, "notes.txt"), nullptr);  // only *.so files are considered
  const PluginRecord* good = record_for(host, "testgood.so");
  ASSERT_NE(good, nullptr);
  EXPECT_TRUE(good->loaded);
  fs::remove_all(text_dir);
}

// Never the current directory, never a relative path.
TEST(PluginHost, IgnoresRelativeDirectoriesAndTheCurrentDirectory) {
  const fs::path dir = fs::temp_directory_path() / ("salvor-test-cwd-" + std::to_string(::getpid()));
  fs::create_directories(dir);
  fs::copy_file(kBuildPlugins / "template.so", dir / "template.so", fs::copy_options::overwrite_existing);
  const fs::path old = fs::current_path();
  fs::current_path(dir);
  const PluginHost host({".", "plugins", ""});
  fs::current_path(old);
  EXPECT_TRUE(host.detectors().empty());
  ASSERT_EQ(host.records().size(), 2u);
  for (const auto& r : host.records()) EXPECT_NE(r.reason.find("relative"), std::string::npos);
  const PluginHost absent({dir / "does-not-exist"});
  EXPECT_TRUE(absent.records().empty());
  ASSERT_EQ(absent.search_directories().size(), 1u);
  EXPECT_FALSE(absent.search_directories()[0].exists);
  fs::remove_all(dir);
}

TEST(Detector, ParameterValidationNamesDetectorAndKey) {
  const PluginHost host({kFixtures});
  auto refused = [&](const ParamSettings& s, const std::string& needle) {
    try {
      host.create("testgood", DetectorSetup{{}, 0.0, s});
      ADD_FAILURE() << needle << " accepted";
    } catch (const salvor::Error& e) {
      EXPECT_EQ(e.kind(), salvor::ErrorKind::usage);
      const std::string msg = e.what();
      EXPECT_NE(msg.find("testgood"), std::string::npos) << msg;
      EXPECT_NE(msg.find(needle), std::string::npos) << msg;
    }
  };
  refused({{"nosuch", "1"}}, "unknown parameter 'nosuch'");
  refused({{"count", "11"}}, "'count'");     // out of range
  refused({{"count", "1.5"}}, "whole number");  // wrong type
  refused({{"gain", "abc"}}, "'gain'");
  refused({{"gain", "0.1"}}, "outside");
  refused({{"flag", "maybe"}}, "'flag'");
  refused({{"misbehave", "explode"}}, "none, bad_bit, bad_sign, fail, non_finite");
  refused({{"count", "2"}, {"count", "3"}}, "twice");
  Detector ok = host.create("testgood", DetectorSetup{{}, 0.0, {{"count", "10"}, {"flag", "yes"}, {"misbehave", "none"}}});
  EXPECT_EQ(ok.parameter_values()[1].second, 10.0);
  EXPECT_EQ(ok.parameter_values()[3].second, 1.0);
  EXPECT_NE(ok.describe().find("count=10"), std::string::npos) << ok.describe();
  EXPECT_THROW(host.create("nosuch", DetectorSetup{}), salvor::Error);
}

// Status codes and message buffers become salvor::Error; contract breaches are caught.
TEST(Detector, PluginFailuresAndContractBreachesBecomeErrors) {
  const PluginHost host({kBuildPlugins, kFixtures});
  try {  // the template refuses a target it cannot slice, with its own message
    host.create("template", DetectorSetup{{1.0, 0.0, -1.0}, 0.0, {}});
    FAIL() << "template accepted PR4";
  } catch (const salvor::Error& e) {
    EXPECT_EQ(e.kind(), salvor::ErrorKind::usage);
    EXPECT_NE(std::string(e.what()).find("dicode"), std::string::npos) << e.what();
  }
  EXPECT_THROW(host.create("dfe", DetectorSetup{{}, 0.0, {}}), salvor::Error);  // wants a target
  std::vector<float> x{0.5f, -0.5f, 1.0f};
  std::vector<uint8_t> bits(8);
  std::vector<float> llr(8);
  for (const char* how : {"bad_bit", "bad_sign", "fail", "non_finite"}) {
    Detector d = host.create("testgood", DetectorSetup{{}, 0.0, {{"misbehave", how}}});
    try {
      d.process(x, {}, bits, llr);
      ADD_FAILURE() << how << " not caught";
    } catch (const salvor::Error& e) {
      const std::string msg = e.what();
      EXPECT_NE(msg.find("testgood"), std::string::npos) << msg;
      if (std::string(how) == "fail") {
        EXPECT_NE(msg.find("asked to fail at block of 3"), std::string::npos) << msg;
      }
      if (std::string(how) == "bad_sign") {
        EXPECT_NE(msg.find("sign"), std::string::npos) << msg;
      }
      if (std::string(how) == "non_finite") {  // the offender is named, at its place
        EXPECT_NE(msg.find("inf"), std::string::npos) << msg;
        EXPECT_NE(msg.find("at 2"), std::string::npos) << msg;
      }
    }
  }
  Detector d = host.create("testgood", DetectorSetup{});
  std::vector<uint8_t> small(2);
  EXPECT_THROW(d.process(x, {}, small, llr), salvor::Error);  // room below count + latency
  EXPECT_THROW(d.train(x, std::vector<uint8_t>(3, 0), 1), salvor::Error);  // cannot train
  EXPECT_EQ(d.process(x, {}, bits, llr), 3u);
  Detector moved = std::move(d);  // RAII: one destroy, by the new owner
  EXPECT_EQ(moved.process(x, {}, bits, llr), 3u);
}

// template on an ideal dicode channel: y = a_k - a_{k-1} + noise, sigma = 0.15. An error
// needs |noise| > 1 = 6.7 sigma (Q(6.7) ~ 1e-11 per bit): zero errors in 50000 bits.
// Its llr is the two-hypothesis Gaussian LLR A(|y| - A/2)/sigma^2, A = 2 (Proakis).
TEST(TemplateDetector, ZeroErrorsOnDicodeAtHighSnrAndGaussianLlr) {
  const PluginHost host = shipped_host();
  const double sigma = 0.15;
  Detector det = host.create("template", DetectorSetup{{1.0, -1.0}, sigma, {}});
  const auto a = random_levels(50000, 101);
  const auto y = pr_signal({1.0, -1.0}, a, sigma, 102);
  const Detected r = detect_all(det, y, 4096);
  ASSERT_EQ(r.bits.size(), a.size());
  EXPECT_EQ(bit_errors(r.bits, nrzi_bits(a)), 0u);
  expect_llr_signs_agree(r);
  for (size_t i = 0; i < 50; ++i) {
    const double expect = 2.0 * (std::fabs(y[i]) - 1.0) / (sigma * sigma);
    EXPECT_NEAR(r.llr[i], expect, 1e-3 * std::max(1.0, std::fabs(expect)));
  }
}

// dfe on an ideal PR4 channel, sigma = 0.15: with correct feedback z = a_k + noise, an
// error needs |noise| > 1 (6.7 sigma): zero errors.
TEST(DfeDetector, ZeroErrorsOnPr4AtHighSnrWithTargetDesign) {
  const PluginHost host = shipped_host();
  Detector det = host.create("dfe", DetectorSetup{{1.0, 0.0, -1.0}, 0.15, {}});
  const auto a = random_levels(50000, 111);
  const auto y = pr_signal({1.0, 0.0, -1.0}, a, 0.15, 112);
  const Detected r = detect_all(det, y, 1000);
  ASSERT_EQ(r.bits.size(), a.size());
  EXPECT_EQ(bit_errors(r.bits, nrzi_bits(a)), 0u);
  expect_llr_signs_agree(r);
}

// dfe trained by LMS on known bits of an UNEQUALIZED Lorentzian (PW50/T = 1.5): the taps
// designed from PR4 alone fail on it; after train() on 6000 known bits it detects 20000
// fresh bits without error at sigma = 0.02.
TEST(DfeDetector, TrainingOnKnownBitsLearnsAnUnequalizedChannel) {
  const PluginHost host = shipped_host();
  const auto h = lorentzian_bit_response(1.5, 8);
  const ParamSettings params{{"ff_taps", "11"}, {"fb_taps", "6"}, {"step_size", "0.05"}};
  const auto a = random_levels(20000, 121);
  const auto x = convolve_levels(h, a, 0.02, 122);
  Detector untrained = host.create("dfe", DetectorSetup{{1.0, 0.0, -1.0}, 0.0, params});
  const size_t untrained_errors = bit_errors(detect_all(untrained, x, 4096).bits, nrzi_bits(a), 100);

  Detector det = host.create("dfe", DetectorSetup{{1.0, 0.0, -1.0}, 0.0, params});
  const auto at = random_levels(6000, 123);
  const auto xt = convolve_levels(h, at, 0.02, 124);
  // The channel's response to level k peaks at sample k + 8 (response origin at index 8).
  std::vector<float> xt_aligned(xt.begin() + 8, xt.end());
  std::vector<uint8_t> bt = nrzi_bits(at);
  bt.resize(xt_aligned.size());
  det.train(xt_aligned, bt, -1);
  det.train(xt_aligned, bt, -1);  // a second pass over the same bits
  std::vector<float> x_aligned(x.begin() + 8, x.end());
  const Detected r = detect_all(det, x_aligned, 777);
  auto want = nrzi_bits(a);
  want.resize(x_aligned.size());
  EXPECT_GT(untrained_errors, 1000u);
  EXPECT_EQ(bit_errors(r.bits, want, 20), 0u);
  expect_llr_signs_agree(r);
}

// Peak detection works at low density and fails at high density (references section 1/6:
// "barely works at PW50/T ratios above 1", Taratorin 2004 ch. 9). Unequalized Lorentzian,
// sigma = 0.02: zero errors at PW50/T = 1.0; above 1 % of the bits wrong at PW50/T = 2.5
// (the two thresholds are this test's, the qualitative behaviour is the source's).
TEST(PeakDetector, NearZeroErrorsAtLowDensityAndFailsAtHighDensity) {
  const PluginHost host = shipped_host();
  auto ber = [&](double density) {
    const auto h = lorentzian_bit_response(density, 8);
    const auto a = random_levels(40000, 131);
    const auto x = convolve_levels(h, a, 0.02, 132);
    // Transition k (between a_{k-1} and a_k) peaks at sample k + 8 (origin at index 8).
    const std::vector<float> aligned(x.begin() + 8, x.end());
    Detector det = host.create("peak", DetectorSetup{{}, 0.0, {}});
    const Detected r = detect_all(det, aligned, 4096);
    expect_llr_signs_agree(r);
    auto want = nrzi_bits(a);
    want.resize(aligned.size());
    return static_cast<double>(bit_errors(r.bits, want, 20)) / static_cast<double>(want.size() - 20);
  };
  EXPECT_EQ(ber(1.0), 0.0);
  EXPECT_GT(ber(2.5), 0.01);
}

// All three: chunks of 1, 7, 4096 and the whole give identical bits and llrs, and flagged
// samples get llr ~ 0 (|llr| <= 1e-5) with the sign still agreeing with the bit.
TEST(ShippedDetectors, ChunkingInvariantAndErasuresGiveZeroLlr) {
  const PluginHost host = shipped_host();
  const auto a = random_levels(9000, 141);
  struct Case {
    const char* name;
    std::vector<double> target;
    std::vector<float> signal;
  };
  const auto h = lorentzian_bit_response(1.0, 8);
  auto raw = convolve_levels(h, a, 0.02, 142);
  std::vector<Case> cases{{"template", {1.0, -1.0}, pr_signal({1.0, -1.0}, a, 0.1, 143)},
                          {"dfe", {1.0, 0.0, -1.0}, pr_signal({1.0, 0.0, -1.0}, a, 0.1, 144)},
                          {"peak", {}, std::vector<float>(raw.begin() + 8, raw.end())}};
  std::vector<uint8_t> erasure(9000, 0);
  for (size_t i = 3000; i < 3010; ++i) erasure[i] = 1;
  for (auto& c : cases) {
    erasure.resize(c.signal.size());
    auto make = [&] { return host.create(c.name, DetectorSetup{c.target, 0.1, {}}); };
    Detector whole_det = make();
    const Detected whole = detect_all(whole_det, c.signal, c.signal.size(), erasure);
    ASSERT_EQ(whole.bits.size(), c.signal.size()) << c.name;
    for (size_t chunk : {1u, 7u, 4096u}) {
      Detector d = make();
      const Detected r = detect_all(d, c.signal, chunk, erasure);
      EXPECT_EQ(r.bits, whole.bits) << c.name << " chunk " << chunk;
      EXPECT_EQ(r.llr, whole.llr) << c.name << " chunk " << chunk;
    }
    for (size_t i = 3000; i < 3010; ++i) EXPECT_LE(std::fabs(whole.llr[i]), 1e-5f) << c.name << " bit " << i;
    EXPECT_GT(std::fabs(whole.llr[2000]), 1e-3f) << c.name;  // unflagged bits keep their reliability
    expect_llr_signs_agree(whole);
    // A NaN sample (bad input upstream) is treated like an erasure, never a crash.
    std::vector<float> with_nan = c.signal;
    with_nan[100] = std::nanf("");
    Detector nan_det = make();
    const Detected nan_run = detect_all(nan_det, with_nan, 4096);
    EXPECT_LE(std::fabs(nan_run.llr[100]), 1e-5f) << c.name;
    // reset() starts a fresh span: the same input gives the same output again.
    whole_det.reset();
    const Detected again = detect_all(whole_det, c.signal, 4096, erasure);
    EXPECT_EQ(again.bits, whole.bits) << c.name;
  }
}

// The whole chain on a Lorentzian: NLMS equalizer trained on known levels towards the
// detector's target, then the detector through the host; zero errors at sigma = 0.02.
TEST(ShippedDetectors, EqualizerThenDetectorOnLorentzianChannel) {
  const PluginHost host = shipped_host();
  struct Case {
    const char* name;
    double density;
    std::vector<double> target;
    const char* target_name;
  };
  for (const Case& c : {Case{"template", 1.0, {1.0, -1.0}, "dicode"}, Case{"dfe", 2.0, {1.0, 0.0, -1.0}, "PR4"}}) {
    const auto h = lorentzian_bit_response(c.density, 8);
    salvor::equalize::EqualizerConfig ec;
    ec.taps = 15;
    ec.target = c.target;
    ec.target_name = c.target_name;
    ec.freeze_after_training = true;
    ec.delay = 7;  // mid-filter
    salvor::equalize::Equalizer eq(ec);
    const auto at = random_levels(20000, 151);
    const auto xt = convolve_levels(h, at, 0.02, 152);
    // Position j of the equalizer = level j - 8 of the channel: shift the known levels.
    std::vector<int8_t> lv(xt.size(), 0);
    for (size_t j = 8; j < xt.size(); ++j) lv[j] = at[j - 8];
    std::vector<float> y(xt.size());
    eq.train(xt, lv, y);
    eq.flush(y);
    const auto a = random_levels(20000, 153);
    const auto x = convolve_levels(h, a, 0.02, 154);
    std::vector<float> yx(x.size());
    const auto p = eq.process(x, yx);
    const size_t tail = eq.flush(std::span(yx).subspan(p.produced));
    ASSERT_EQ(p.produced + tail, x.size());
    Detector det = host.create(c.name, DetectorSetup{c.target, std::sqrt(eq.running_mse()), {}});
    std::vector<float> aligned(yx.begin() + 8, yx.end());
    const Detected r = detect_all(det, aligned, 4096);
    auto want = nrzi_bits(a);
    want.resize(aligned.size());
    EXPECT_LT(eq.running_mse(), 0.05) << c.name;
    EXPECT_EQ(bit_errors(r.bits, want, 30), 0u) << c.name << " (equalizer MSE " << eq.running_mse() << ")";
  }
}

// The decision-directed loop as the pipeline runs it: equalizer -> dfe through the host ->
// the dfe's NRZI decisions turned into levels (levels_from_nrzi) -> adapt_decided() with
// the detector's latency. After training, the channel gain drops by 20 %: the loop tracks
// it (MSE within 1.5 x the Wiener MSE of the weaker channel) with zero bit errors, while
// frozen taps keep the gain error (MSE above 2 x; both margins common practice, no
// source). Round trip of levels_from_nrzi too.
TEST(ShippedDetectors, DecisionDirectedEqualizerFromDetectorDecisions) {
  using namespace salvor::equalize;
  const auto a_rt = random_levels(1000, 160);
  EXPECT_EQ(levels_from_nrzi(nrzi_bits(a_rt, 1), 1), a_rt);  // bit-exact round trip

  const PluginHost host = shipped_host();
  const auto h = lorentzian_bit_response(2.0, 8);
  const double sigma = 0.02;
  std::vector<double> weak = h;
  for (double& v : weak) v *= 0.8;
  // Equalizer position j holds level j - 8 (response origin at index 8), main tap 7: in
  // channel_statistics' terms that is delay 14 on the response advanced by one sample.
  const std::vector<double> weak_shifted(weak.begin() + 1, weak.end());
  const MmseDesignConfig dc{15, 14, 3, 0.0};
  const double jmin_weak = solve_wiener(channel_statistics(weak_shifted, sigma * sigma, dc),
                                        std::vector<double>{1.0, 0.0, -1.0}, dc).mse;
  auto run = [&](bool freeze, size_t& errors) {
    EqualizerConfig ec;
    ec.delay = 7;
    ec.freeze_after_training = freeze;
    ec.max_decision_latency = 128;
    Equalizer eq(ec);
    const auto at = random_levels(20000, 161);
    const auto xt = convolve_levels(h, at, sigma, 162);
    std::vector<int8_t> lv(xt.size(), -1);  // levels before the start are -1
    for (size_t j = 8; j < xt.size(); ++j) lv[j] = at[j - 8];
    std::vector<float> y(xt.size());
    eq.train(xt, lv, y);
    eq.flush(y);

    const auto a = random_levels(30000, 163);
    const auto x = convolve_levels(h, a, sigma, 164, 0.8);
    Detector det = host.create("dfe", DetectorSetup{{1.0, 0.0, -1.0}, sigma, {}});
    std::vector<float> ychunk(64);
    std::vector<uint8_t> bits(det.capacity_for(64));
    std::vector<float> llr(bits.size());
    std::vector<uint8_t> decided_bits;
    int8_t level = -1;  // the dfe takes the level before its first bit as -1
    uint64_t decided = 0;
    for (size_t i = 0; i < x.size(); i += 64) {
      const auto p = eq.process(std::span(x).subspan(i, std::min<size_t>(64, x.size() - i)), ychunk);
      const size_t q = det.process(std::span(ychunk).first(p.produced), {}, bits, llr);
      const auto levels = levels_from_nrzi(std::span(bits).first(q), level);
      if (q) level = levels.back();
      eq.adapt_decided(decided, levels);
      decided += q;
      decided_bits.insert(decided_bits.end(), bits.begin(), bits.begin() + q);
      if (i == 20032) eq.take_span_stats();  // measure the last third
    }
    std::vector<int8_t> want_levels(decided_bits.size(), -1);
    for (size_t j = 8; j < want_levels.size(); ++j) want_levels[j] = a[j - 8];
    const auto want = nrzi_bits(want_levels);
    errors = bit_errors(decided_bits, want, 20);
    return eq.take_span_stats();
  };
  size_t tracked_errors = 1, frozen_errors = 1;
  const salvor::equalize::ErrorStats tracked = run(false, tracked_errors);
  const salvor::equalize::ErrorStats frozen = run(true, frozen_errors);
  EXPECT_EQ(tracked_errors, 0u);
  ASSERT_GT(tracked.count, 9000u);
  EXPECT_LT(tracked.mse, 1.5 * jmin_weak);
  EXPECT_GT(frozen.mse, 2.0 * jmin_weak);
}
