// End-to-end: `salvor inspect` on a simulator capture and on bad input. The expected
// values come from the simulator's own sidecar (tools/synth writes the true mean bit rate,
// the SNR by the same definition, and the channel density PW50/T).

#include <gtest/gtest.h>

#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>
#include <sstream>
#include <string>
#include <sys/wait.h>

namespace fs = std::filesystem;
using nlohmann::json;

namespace {

struct Result {
  int code = -1;
  std::string out, err;
};

std::string slurp(const fs::path& p) {
  std::ifstream in(p);
  std::stringstream ss;
  ss << in.rdbuf();
  return ss.str();
}

Result run(const std::string& args, const fs::path& dir) {
  const fs::path o = dir / "stdout.txt", e = dir / "stderr.txt";
  const std::string cmd = args + " >" + o.string() + " 2>" + e.string();
  const int st = std::system(cmd.c_str());
  Result r;
  r.code = WIFEXITED(st) ? WEXITSTATUS(st) : -1;
  r.out = slurp(o);
  r.err = slurp(e);
  return r;
}

const std::string kSalvor = std::string(SALVOR_BIN_DIR) + "/salvor";
const std::string kSynth = std::string(SALVOR_BIN_DIR) + "/salvor-synth";

class InspectCli : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = fs::temp_directory_path() / ("salvor-inspect-test-" + std::to_string(::getpid()));
    fs::remove_all(dir_);
    fs::create_directories(dir_);
    const std::string scenario = std::string(SALVOR_SOURCE_DIR) + "/tests/timing/data/inspect-check.toml";
    synth_ = run(kSynth + " --scenario " + scenario + " --out " + (dir_ / "synth").string() + " -q", dir_);
  }
  static void TearDownTestSuite() { fs::remove_all(dir_); }
  static fs::path dir_;
  static Result synth_;
};
fs::path InspectCli::dir_;
Result InspectCli::synth_;

}  // namespace

TEST_F(InspectCli, JsonOnSimulatorCaptureMatchesItsTruth) {
  ASSERT_EQ(synth_.code, 0) << synth_.err;
  const fs::path cap = dir_ / "synth" / "captures" / "c000-h0-r0.flac";
  ASSERT_TRUE(fs::exists(cap));
  const json side = json::parse(slurp(cap.string() + ".json"));
  // Nominal 100 Mbit/s (the descriptor's), so the timing loop has to find the offset.
  const Result r = run(kSalvor + " inspect " + cap.string() + " --json --bit-rate 100e6", dir_);
  ASSERT_EQ(r.code, 0) << r.err;
  const json j = json::parse(r.out);
  for (const char* key : {"sample_rate_hz", "samples", "duration_s", "clipped_fraction", "bit_rate_hz",
                          "samples_per_bit", "snr_db", "pw50_bits", "sync_marks_found", "frequency_offset_ppm",
                          "sync_marks", "preambles_found", "dc_offset", "lock"})
    EXPECT_TRUE(j.contains(key)) << key;
  EXPECT_DOUBLE_EQ(j["sample_rate_hz"].get<double>(), side["sample_rate_hz"].get<double>());
  EXPECT_EQ(j["samples"].get<uint64_t>(), side["rig"]["samples"].get<uint64_t>());
  EXPECT_NEAR(j["duration_s"].get<double>(), j["samples"].get<double>() / j["sample_rate_hz"].get<double>(), 1e-12);
  EXPECT_EQ(j["clipped_fraction"].get<double>(), 0.0);
  // bit rate: nominal x (1 + offset) within 0.05 % of the simulator's true mean bit rate
  const double truth = side["bit_rate_hz"].get<double>();
  EXPECT_NEAR(j["bit_rate_hz"].get<double>(), truth, 5e-4 * truth);
  EXPECT_NEAR(j["frequency_offset_ppm"].get<double>(), (truth / 100e6 - 1) * 1e6, 50.0);
  EXPECT_NEAR(j["samples_per_bit"].get<double>(), side["sample_rate_hz"].get<double>() / truth, 5e-4 * 2.5);
  // SNR within 1 dB, PW50 within 5 % (the simulator's definitions: sidecar synth.conventions)
  EXPECT_NEAR(j["snr_db"].get<double>(), side["synth"]["channel"]["snr_db"].get<double>(), 1.0);
  EXPECT_NEAR(j["pw50_bits"].get<double>(), side["synth"]["channel"]["density"].get<double>(),
              0.05 * side["synth"]["channel"]["density"].get<double>());
  // one revolution of 16 sectors plus the lead and tail: every sector at least once,
  // all locked, each with its sector number, the first ones in order
  EXPECT_GE(j["sync_marks_found"].get<int>(), 16);
  EXPECT_LE(j["sync_marks_found"].get<int>(), 17);
  EXPECT_GE(j["preambles_found"].get<int>(), 16);
  int expect_sector = j["sync_marks"][0]["sector_guess"].get<int>();
  for (const auto& m : j["sync_marks"]) {
    EXPECT_TRUE(m["locked"].get<bool>());
    ASSERT_FALSE(m["sector_guess"].is_null());
    EXPECT_EQ(m["sector_guess"].get<int>(), expect_sector % 16);
    ++expect_sector;
  }
  EXPECT_EQ(j["lock"]["lock_losses"].get<int>(), 0);
  EXPECT_EQ(j["lock"]["sync_spacing_slips"].get<int>(), 0);

  // The human table carries the same figures.
  const Result h = run(kSalvor + " inspect " + cap.string(), dir_);
  ASSERT_EQ(h.code, 0) << h.err;
  for (const char* row : {"sample rate", "bit rate", "samples per bit", "SNR", "PW50", "sync marks found", "PLL locked"})
    EXPECT_NE(h.out.find(row), std::string::npos) << row;
}

TEST_F(InspectCli, BadInputExitsThreeNamingTheFile) {
  const fs::path bad = dir_ / "broken.wav";
  { std::ofstream(bad) << "RIFF this is not a wave file"; }
  Result r = run(kSalvor + " inspect " + bad.string() + " --sample-rate 1e8", dir_);
  EXPECT_EQ(r.code, 3) << r.out << r.err;  // DEVELOPERS.md: 3 = input missing, unreadable or invalid
  EXPECT_NE(r.err.find("broken.wav"), std::string::npos) << r.err;
  EXPECT_NE(r.err.find("salvor inspect: "), std::string::npos) << r.err;
  r = run(kSalvor + " inspect " + (dir_ / "no-such-capture.flac").string(), dir_);
  EXPECT_EQ(r.code, 3) << r.err;
  EXPECT_NE(r.err.find("no-such-capture.flac"), std::string::npos) << r.err;
  // a usage error is 2
  r = run(kSalvor + " inspect", dir_);
  EXPECT_EQ(r.code, 2) << r.err;
  r = run(kSalvor + " inspect " + bad.string() + " --bit-rate -5", dir_);
  EXPECT_EQ(r.code, 2) << r.err;
}
