// Interoperation: every container the simulator writes opens through the capture loader
// (core/load) with the simulator's sample values, rate, bit rate and track address.
#include <gtest/gtest.h>

#include <filesystem>

#include "load/capture_reader.hpp"
#include "synth/synth_run.hpp"

using namespace salvor::synth;
namespace fs = std::filesystem;

namespace {
std::vector<float> load_all(const fs::path& p, salvor::load::CaptureInfo& info) {
  auto r = salvor::load::open_capture(p);
  info = r.info();
  std::vector<float> all, buf(7777);
  while (size_t n = r.read(buf)) all.insert(all.end(), buf.begin(), buf.begin() + static_cast<long>(n));
  return all;
}
}  // namespace

TEST(SynthLoad, EveryContainerLoadsWithTheSameSamples) {
  const Scenario s = load_scenario(find_scenario("tiny"));
  struct Case { Container c; SampleFormat f; };
  const Case cases[] = {{Container::zstd, SampleFormat::int16}, {Container::wav, SampleFormat::int16},
                        {Container::rf64, SampleFormat::int16}, {Container::w64, SampleFormat::int16},
                        {Container::flac, SampleFormat::int16}, {Container::sigmf, SampleFormat::int16},
                        {Container::wav, SampleFormat::float32}, {Container::sigmf, SampleFormat::float32},
                        {Container::zstd, SampleFormat::float32}, {Container::flac, SampleFormat::int8},
                        {Container::sigmf, SampleFormat::int8}};
  std::vector<float> ref16, ref32;
  for (const Case& k : cases) {
    const fs::path out = fs::temp_directory_path() /
                         ("salvor-synth-load-" + to_string(k.c) + "-" + to_string(k.f) + "-" + std::to_string(::getpid()));
    fs::remove_all(out);
    RunOptions o;
    o.out = out;
    o.container = k.c;
    o.sample_format = k.f;
    run_scenario(s, o);
    salvor::load::CaptureInfo info;
    const auto x = load_all(out / "captures" / capture_file_name("c000-h0-r0", k.c), info);
    const std::string what = to_string(k.c) + "/" + to_string(k.f);
    EXPECT_EQ(info.sample_rate_hz, 200e6) << what;  // 2 samples per bit at 100 Mbit/s, from the sidecar
    ASSERT_TRUE(info.bit_rate_hz) << what;
    EXPECT_NEAR(*info.bit_rate_hz, 100e6 / (1 - 100e-6), 1e-3) << what;  // tiny.toml: +100 ppm
    EXPECT_EQ(info.cylinder, 0);
    EXPECT_EQ(info.head, 0);
    EXPECT_EQ(info.revolution, 0);
    EXPECT_EQ(info.full_scale, 1.0);
    EXPECT_EQ(info.format, "tf1-512");
    if (k.f == SampleFormat::int16) {
      if (ref16.empty()) ref16 = x;
      EXPECT_EQ(x, ref16) << what;  // same integers, same floats (x / 32768)
    } else if (k.f == SampleFormat::float32) {
      if (ref32.empty()) ref32 = x;
      EXPECT_EQ(x, ref32) << what;
    } else {
      ASSERT_EQ(x.size(), ref16.size());
      for (size_t i = 0; i < x.size(); ++i) ASSERT_NEAR(x[i], ref16[i], 1.0 / 128) << what << " @" << i;
    }
    fs::remove_all(out);
  }
  // The int16 grid is within half a step of the float32 digitizer output.
  ASSERT_EQ(ref16.size(), ref32.size());
  for (size_t i = 0; i < ref16.size(); ++i) ASSERT_NEAR(ref16[i], ref32[i], 0.5 / 32768 + 1e-7) << i;
}
