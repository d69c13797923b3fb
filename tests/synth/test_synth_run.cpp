// Whole runs of the simulator: determinism, output folder layout, truth files, the command.
#include <gtest/gtest.h>

#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <map>
#include <set>
#include <sys/wait.h>

#include <nlohmann/json.hpp>

#include "common/error.hpp"
#include "common/sha256.hpp"
#include "format/track_codec.hpp"
#include "format/track_format.hpp"
#include "synth/synth_run.hpp"

using namespace salvor::synth;
namespace fs = std::filesystem;

namespace {

fs::path temp_dir(const std::string& name) {
  fs::path d = fs::temp_directory_path() / ("salvor-synth-run-" + name + "-" + std::to_string(::getpid()));
  fs::remove_all(d);
  return d;
}

std::string read_text(const fs::path& p) {
  std::ifstream in(p, std::ios::binary);
  return {std::istreambuf_iterator<char>(in), std::istreambuf_iterator<char>()};
}

// Every file under `dir`, relative path -> contents.
std::map<std::string, std::string> tree(const fs::path& dir) {
  std::map<std::string, std::string> m;
  for (const auto& e : fs::recursive_directory_iterator(dir))
    if (e.is_regular_file()) m[fs::relative(e.path(), dir).string()] = read_text(e.path());
  return m;
}

RunSummary run(const Scenario& s, const fs::path& out, uint64_t seed, Container c = Container::zstd,
               bool bits = false) {
  RunOptions o;
  o.out = out;
  o.seed = seed;
  o.container = c;
  o.bitstreams = bits;
  o.chunk_samples = 10007;
  return run_scenario(s, o);
}

int run_command(const std::string& args) {
  const std::string cmd = std::string(SALVOR_BIN_DIR) + "/salvor-synth " + args + " >/dev/null 2>&1";
  const int rc = std::system(cmd.c_str());
  return WIFEXITED(rc) ? WEXITSTATUS(rc) : -1;
}

// One track of tf1-512 with damage of every kind on it, two revolutions.
const char* kDamaged = R"(
[scenario]
name = "damaged-track"
format = "tf1-512"
seed = 3
revolutions = 2
image = "random"
[tracks]
cylinders = [4, 4]
heads = [1]
[capture]
container = "sigmf"
sample_format = "int16"
samples_per_bit = 2.0
lead_bits = 400
tail_bits = 400
[channel]
density = 2.2
snr_db = 25
[[scratch]]
head = 1
cylinders = [2, 6]
start_deg = 10.0
length_deg = 40.0
skew_deg_per_cylinder = 1.0
depth = 0.9
edge_bits = 100
[[thermal_asperity]]
cylinder = 4
head = 1
position_deg = 200.0
amplitude = 1.0
decay_bits = 100
revolutions = [1]
[[defect]]
cylinder = 4
head = 1
start_deg = 355.0
length_deg = 10.0
)";

}  // namespace

// Same scenario and seed: byte-identical files; another seed: different captures and image.
TEST(SynthRun, SameSeedGivesByteIdenticalOutput) {
  const Scenario s = load_scenario(find_scenario("tiny"));
  const fs::path a = temp_dir("a"), b = temp_dir("b"), c = temp_dir("c");
  run(s, a, 5);
  run(s, b, 5);
  run(s, c, 6);
  const auto ta = tree(a), tb = tree(b), tc = tree(c);
  ASSERT_FALSE(ta.empty());
  EXPECT_EQ(ta, tb);
  ASSERT_EQ(ta.size(), tc.size());
  const std::string cap = "captures/c000-h0-r0.raw.zst";
  ASSERT_TRUE(ta.count(cap));
  EXPECT_NE(ta.at(cap), tc.at(cap));
  EXPECT_NE(ta.at("truth/image.bin"), tc.at("truth/image.bin"));
  EXPECT_NE(ta.at(cap + ".json"), tc.at(cap + ".json"));
  for (const auto& d : {a, b, c}) fs::remove_all(d);
}

TEST(SynthRun, ManifestSidecarsAndTruth) {
  const Scenario s = parse_scenario(kDamaged, fs::path(SALVOR_SOURCE_DIR) / "corpora/scenarios/inline.toml");
  const fs::path out = temp_dir("truth");
  const RunSummary sum = run(s, out, 3, Container::sigmf, true);
  EXPECT_EQ(sum.captures, 2u);
  const auto fmt = salvor::format::load_track_format(salvor::format::find_track_format("tf1-512"));
  const auto layout = salvor::format::layout_track(fmt);

  // manifest.json (DEVELOPERS.md schema); every path exists, relative to the manifest.
  const auto m = nlohmann::json::parse(read_text(out / "manifest.json"));
  EXPECT_EQ(m["salvor_manifest"], 1);
  EXPECT_EQ(m["format"], "tf1-512");
  EXPECT_EQ(m["format_file"], "format.toml");
  EXPECT_EQ(m["seed"], 3);
  EXPECT_EQ(read_text(out / "format.toml"), read_text(salvor::format::find_track_format("tf1-512")));
  ASSERT_EQ(m["captures"].size(), 2u);
  for (const auto& c : m["captures"]) {
    EXPECT_TRUE(fs::exists(out / c["path"].get<std::string>())) << c;
    EXPECT_EQ(c["cylinder"], 4);
    EXPECT_EQ(c["head"], 1);
    const auto meta = nlohmann::json::parse(read_text(out / c["sidecar"].get<std::string>()));
    const auto& g = meta["global"];
    EXPECT_EQ(g["core:sample_rate"], 200e6);  // 2 samples per bit at 100 Mbit/s
    EXPECT_EQ(g["salvor:format"], "tf1-512");
    EXPECT_EQ(g["salvor:full_scale"], 1.0);  // stored normalised; the loader does not rescale
    EXPECT_EQ(g["salvor:synth"]["capture"]["full_scale"], 2.0);
    EXPECT_EQ(g["salvor:revolution"], c["revolution"]);
    EXPECT_EQ(g["salvor:synth"]["channel"]["density"], 2.2);
    // Samples in the file = the count the rig record announces.
    const auto bytes = fs::file_size(out / c["path"].get<std::string>());
    EXPECT_EQ(bytes, 2 * g["salvor:rig"]["samples"].get<uint64_t>());
    // The index passes lead_bits * samples_per_bit samples in, less the sampling phase.
    const double idx = g["salvor:rig"]["index_sample"];
    EXPECT_NEAR(idx, 400 * 2.0, 1.0);
  }
  EXPECT_EQ(m["truth"]["image_sha256"], salvor::sha256_file_hex(out / "truth/image.bin"));
  EXPECT_EQ(fs::file_size(out / "truth/image.bin"), fmt.image_bytes());

  // truth/bits: packed MSB first, equal to the reference encoder's output.
  std::vector<uint8_t> image(fmt.image_bytes());
  {
    const std::string t = read_text(out / "truth/image.bin");
    std::copy(t.begin(), t.end(), image.begin());
  }
  const auto bits = salvor::format::encode_track(fmt, image, 4, 1);
  const std::string packed = read_text(out / "truth/bits/c004-h1.bits");
  ASSERT_EQ(packed.size(), (fmt.bits_per_track + 7) / 8);
  for (size_t n = 0; n < bits.size(); ++n)
    ASSERT_EQ((static_cast<uint8_t>(packed[n / 8]) >> (7 - n % 8)) & 1, bits[n]) << n;
  const auto idx = nlohmann::json::parse(read_text(out / "truth/bits/index.json"));
  EXPECT_EQ(idx["bits_per_track"], fmt.bits_per_track);

  // truth/damage.json: exactly the sectors whose [preamble, end) overlaps a damaged span.
  const double L = static_cast<double>(fmt.bits_per_track);
  const double scratch_a = (10.0 + 2.0) / 360 * L, scratch_b = scratch_a + 40.0 / 360 * L;  // cylinder 4 = 2 + 2
  const double defect_a = 355.0 / 360 * L, defect_len = 10.0 / 360 * L;                       // wraps past the index
  const double ta_a = 200.0 / 360 * L, ta_b = ta_a + 4 + 100 * std::log(1.0 / 0.05);
  auto overlaps = [](double a, double b, const salvor::format::SectorPlacement& p) {
    return std::max(a, double(p.preamble_bit)) < std::min(b, double(p.end_bit));
  };
  std::map<std::string, std::set<std::pair<int, int>>> expect;  // kind -> (revolution, sector)
  for (int rev = 0; rev < 2; ++rev) {
    for (const auto& p : layout.sectors) {
      if (overlaps(scratch_a, scratch_b, p)) expect["scratch"].insert({rev, p.sector});
      if (overlaps(defect_a, L, p) || overlaps(0, defect_a + defect_len - L, p)) expect["defect"].insert({rev, p.sector});
      if (rev == 1 && overlaps(ta_a, ta_b, p)) expect["thermal_asperity"].insert({rev, p.sector});
    }
  }
  ASSERT_FALSE(expect["scratch"].empty());
  ASSERT_FALSE(expect["defect"].empty());
  ASSERT_FALSE(expect["thermal_asperity"].empty());
  const auto dmg = nlohmann::json::parse(read_text(out / "truth/damage.json"));
  std::map<std::string, std::set<std::pair<int, int>>> got;
  for (const auto& e : dmg["sectors"]) {
    got[e["kind"]].insert({e["revolution"].get<int>(), e["sector"].get<int>()});
    EXPECT_EQ(e["lba"], fmt.lba(4, 1, e["sector"].get<int>()));
    EXPECT_EQ(e["cylinder"], 4);
    EXPECT_EQ(e["head"], 1);
    EXPECT_LT(e["bit_span"][0].get<double>(), e["bit_span"][1].get<double>());
  }
  EXPECT_EQ(got, expect);
  fs::remove_all(out);
}

// The noiseless channel bits a capture was rendered from parse back, with the format's own
// bit-exact parser, into the image's sectors: the simulator feeds the right bits.
TEST(SynthRun, RenderedBitsParseBackToTheImage) {
  const Scenario s = load_scenario(find_scenario("tiny"));
  const fs::path out = temp_dir("parse");
  run(s, out, 9, Container::zstd, true);
  const auto fmt = salvor::format::load_track_format(out / "format.toml");
  const std::string packed = read_text(out / "truth/bits/c000-h0.bits");
  std::vector<uint8_t> bits(fmt.bits_per_track);
  for (size_t n = 0; n < bits.size(); ++n) bits[n] = (static_cast<uint8_t>(packed[n / 8]) >> (7 - n % 8)) & 1;
  const std::string image = read_text(out / "truth/image.bin");
  const auto sectors = salvor::format::parse_track(fmt, bits);
  ASSERT_EQ(sectors.size(), static_cast<size_t>(fmt.sectors_per_track));
  for (const auto& p : sectors) {
    ASSERT_TRUE(p.header && p.data_verified);
    const size_t off = fmt.lba(0, 0, p.header->sector) * fmt.user_bytes;
    EXPECT_EQ(std::string(p.user_data.begin(), p.user_data.end()), image.substr(off, fmt.user_bytes));
  }
  fs::remove_all(out);
}

// Revolutions of one track: the same written track (same media-noise seed), their own
// electronic noise and speed; the sidecar's true bit rate and the sample count follow the
// revolution's speed offset (local period T0 (1 - eps), renderer.hpp).
TEST(SynthRun, RevolutionsDifferInSpeedAndNoise) {
  Scenario s = load_scenario(find_scenario("tiny"));
  s.revolutions = 3;
  s.spindle.revolution_sigma_ppm = 80;
  const fs::path out = temp_dir("revs");
  run(s, out, 12, Container::sigmf);
  std::set<double> ppms;
  std::set<uint64_t> media, noise;
  std::set<std::string> data;
  for (int r = 0; r < 3; ++r) {
    const std::string stem = "captures/c000-h0-r" + std::to_string(r);
    const auto g = nlohmann::json::parse(read_text(out / (stem + ".sigmf-meta")))["global"];
    const auto& tc = g["salvor:synth"]["this_capture"];
    const double ppm = tc["speed_offset_ppm"];
    ppms.insert(ppm);
    media.insert(tc["media_seed"].get<uint64_t>());
    noise.insert(tc["noise_seed"].get<uint64_t>());
    data.insert(read_text(out / (stem + ".sigmf-data")));
    EXPECT_NEAR(g["salvor:bit_rate_hz"].get<double>(), 100e6 / (1 - ppm * 1e-6), 1e-3);
    const double span_bits = g["salvor:synth"]["bits_per_track"].get<double>() + 500 + 500;  // + lead + tail of tiny.toml
    EXPECT_NEAR(g["salvor:rig"]["samples"].get<double>(), span_bits * (1 - ppm * 1e-6) * 2.0, 1.5);
    EXPECT_EQ(g["salvor:revolution"], r);
  }
  EXPECT_EQ(ppms.size(), 3u);
  EXPECT_EQ(media.size(), 1u);
  EXPECT_EQ(noise.size(), 3u);
  EXPECT_EQ(data.size(), 3u);
  fs::remove_all(out);
}

TEST(SynthRun, CommandLine) {
  const fs::path out = temp_dir("cli");
  EXPECT_EQ(run_command("--help"), 0);
  EXPECT_EQ(run_command("--scenario tiny"), 2);                          // no --out
  EXPECT_EQ(run_command("--scenario no-such-name --out " + out.string()), 2);
  EXPECT_EQ(run_command("--scenario /nonexistent/x.toml --out " + out.string()), 3);
  EXPECT_EQ(run_command("--scenario tiny --out " + out.string() + " --container mp3"), 2);
  EXPECT_EQ(run_command("--scenario tiny --out " + out.string() + " --tracks 30:0"), 2);
  EXPECT_FALSE(fs::exists(out / "manifest.json"));
  EXPECT_EQ(run_command("--scenario tiny --quiet --out " + out.string() + " --container flac --seed 4"), 0);
  EXPECT_TRUE(fs::exists(out / "captures/c000-h0-r0.flac"));
  EXPECT_TRUE(fs::exists(out / "captures/c000-h0-r0.flac.json"));
  EXPECT_EQ(run_command("--scenario tiny --quiet --out " + out.string()), 5);  // not empty
  EXPECT_EQ(run_command("--scenario tiny --quiet --overwrite --out " + out.string() + " --container wav"), 0);
  EXPECT_FALSE(fs::exists(out / "captures/c000-h0-r0.flac"));
  EXPECT_TRUE(fs::exists(out / "captures/c000-h0-r0.wav"));
  fs::remove_all(out);
}

TEST(SynthRun, TrackLists) {
  using P = std::vector<std::pair<int, int>>;
  EXPECT_EQ(parse_track_list("3:1", 24, 2), (P{{3, 1}}));
  EXPECT_EQ(parse_track_list("0-1:*", 24, 2), (P{{0, 0}, {0, 1}, {1, 0}, {1, 1}}));
  EXPECT_EQ(parse_track_list("2:0,2:0,*:1", 3, 2), (P{{2, 0}, {0, 1}, {1, 1}, {2, 1}}));
  for (const char* bad : {"3", "x:1", "3:2", "24:0", "5-2:0", "1:0-", ""})
    EXPECT_THROW(parse_track_list(bad, 24, 2), salvor::Error) << bad;
}
