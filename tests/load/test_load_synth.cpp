// Round trip with the simulator's writers (tools/synth): every container and sample format
// it writes reads back sample-exact, with the sidecar's rate and track address; and a whole
// tiny scenario run opens capture by capture from its manifest.

#include <gtest/gtest.h>

#include <cmath>
#include <fstream>

#include "load_test_util.hpp"
#include "synth/digitizer.hpp"
#include "synth/scenario.hpp"
#include "synth/synth_run.hpp"
#include "synth/writers.hpp"

using namespace salvor::load;
using namespace salvor::load::test;
namespace synth = salvor::synth;

namespace {

// Values exactly on the digitizer grid of `f` (codes / 2^(bits-1); any float for float32).
std::vector<float> grid_samples(synth::SampleFormat f, size_t n) {
  const auto codes = test_int16(n, 31);
  std::vector<float> v(n);
  for (size_t i = 0; i < n; ++i) {
    if (f == synth::SampleFormat::int8) v[i] = static_cast<float>(codes[i] >> 8) / 128.0f;
    else if (f == synth::SampleFormat::int16) v[i] = static_cast<float>(codes[i]) / 32768.0f;
    else v[i] = static_cast<float>(codes[i]) / 1000.0f;  // beyond ±1 on purpose: float is as stored
  }
  return v;
}

}  // namespace

TEST(LoadSynth, EveryWriterReadsBackSampleExact) {
  ScratchDir dir;
  const size_t n = 10007;
  const double fs = 250e6;  // above FLAC's 655350 Hz: the container holds a scaled rate
  int combinations = 0;
  for (synth::Container c : {synth::Container::wav, synth::Container::rf64, synth::Container::w64,
                             synth::Container::flac, synth::Container::sigmf, synth::Container::zstd}) {
    for (synth::SampleFormat f : {synth::SampleFormat::int8, synth::SampleFormat::int16, synth::SampleFormat::float32}) {
      try {
        synth::check_container(c, f, n, "test");
      } catch (const salvor::Error&) {
        continue;  // a combination the simulator refuses to write (e.g. int8 WAV, float FLAC)
      }
      const std::string stem = "c003-h1-r2-" + synth::to_string(c) + "-" + synth::to_string(f);
      const auto samples = grid_samples(f, n);
      auto w = synth::open_capture_writer(c, f, dir.path(), stem, n, fs);
      for (size_t i = 0; i < n; i += 4096) w->write(std::span(samples).subspan(i, std::min<size_t>(4096, n - i)));
      synth::CaptureMeta meta;
      meta.sample_rate_hz = fs;
      meta.bit_rate_hz = 100e6;
      meta.format = "tf1-512";
      meta.cylinder = 3;
      meta.head = 1;
      meta.revolution = 2;
      meta.full_scale = 2.5;
      w->finish(meta);

      auto r = open_capture(w->data_path());
      const auto& i = r.info();
      const std::string what = synth::to_string(c) + "/" + synth::to_string(f);
      EXPECT_EQ(i.sample_rate_hz, fs) << what;
      EXPECT_EQ(i.bit_rate_hz.value_or(0), 100e6) << what;
      EXPECT_EQ(i.format, "tf1-512") << what;
      EXPECT_EQ(i.cylinder.value_or(-1), 3) << what;
      EXPECT_EQ(i.head.value_or(-1), 1) << what;
      EXPECT_EQ(i.revolution.value_or(-1), 2) << what;
      EXPECT_EQ(i.full_scale, 2.5) << what;
      EXPECT_EQ(i.sidecar_path, w->meta_path()) << what;
      EXPECT_EQ(read_all(r, 1000), samples) << what;
      ++combinations;
    }
  }
  EXPECT_GE(combinations, 12);  // 6 containers × at least 2 formats each
}

TEST(LoadSynth, TinyScenarioCapturesOpenFromTheManifest) {
  ScratchDir dir;
  const auto scenario = synth::load_scenario(synth::find_scenario("tiny"));
  for (synth::Container c : {synth::Container::zstd, synth::Container::flac, synth::Container::sigmf}) {
    synth::RunOptions ro;
    ro.out = dir / synth::to_string(c);
    ro.container = c;
    synth::run_scenario(scenario, ro);
    std::ifstream mf(ro.out / "manifest.json");
    const auto manifest = nlohmann::json::parse(mf);
    ASSERT_FALSE(manifest["captures"].empty());
    for (const auto& cap : manifest["captures"]) {
      const fs::path p = ro.out / cap["path"].get<std::string>();
      auto r = open_capture(p);
      const auto& i = r.info();
      EXPECT_EQ(i.cylinder.value_or(-1), cap["cylinder"].get<int>()) << p;
      EXPECT_EQ(i.head.value_or(-1), cap["head"].get<int>()) << p;
      EXPECT_EQ(i.revolution.value_or(-1), cap["revolution"].get<int>()) << p;
      EXPECT_EQ(i.format, manifest["format"].get<std::string>()) << p;
      ASSERT_TRUE(i.bit_rate_hz.has_value()) << p;
      // tiny.toml: samples_per_bit = 2.0, so the rate is twice the bit rate.
      EXPECT_NEAR(i.sample_rate_hz / *i.bit_rate_hz, 2.0, 1e-3) << p;
      auto samples = read_all(r, 65536);
      ASSERT_TRUE(i.total_samples.has_value() || c == synth::Container::zstd);
      if (i.total_samples) {
        EXPECT_EQ(samples.size(), *i.total_samples) << p;
      }
      // int16 digitizer: every sample on the 1/32768 grid and some signal present.
      double energy = 0;
      for (float s : samples) {
        ASSERT_EQ(s * 32768.0f, std::round(s * 32768.0f)) << p;
        energy += static_cast<double>(s) * s;
      }
      EXPECT_GT(energy / static_cast<double>(samples.size()), 1e-4) << p;
    }
  }
}
