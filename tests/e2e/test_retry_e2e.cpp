// salvor retry end to end on the demo: it recovers sectors the first pass did not, never
// loses a verified one, adds no silent errors, changes nothing when run again, and
// survives being killed.

#include <gtest/gtest.h>
#include <signal.h>
#include <unistd.h>

#include <chrono>
#include <random>
#include <set>
#include <thread>

#include "e2e_util.hpp"
#include "pipeline/revolution_combine.hpp"

using namespace e2e;

namespace {

std::set<uint64_t> verified(const fs::path& dir) {
  std::set<uint64_t> v;
  const nlohmann::json map = read_json(dir / "damage-map.json");  // kept alive for the loop
  for (const auto& s : map["sectors"])
    if (s["status"] == "good" || s["status"] == "corrected") v.insert(s["lba"].get<uint64_t>());
  return v;
}

int silent_errors(const fs::path& dir, const fs::path& cap) {
  const std::string image = slurp(dir / "image.bin"), truth = slurp(cap / "truth" / "image.bin");
  int n = 0;
  for (uint64_t lba : verified(dir)) n += !sector_equal(image, truth, lba, 512);
  return n;
}

std::string folder_digest(const fs::path& dir) {
  std::string d;
  for (const char* f : {"image.bin", "sectors.jsonl", "damage-map.json", "damage-map.svg", "run.json"}) d += slurp(dir / f);
  return d;
}

// The first pass with plain Viterbi, made once.
fs::path first_pass(const fs::path& cap) {
  // Made by each test process for itself (they may run in parallel).
  fs::path d = fs::temp_directory_path() / ("salvor-e2e-retry-first-" + std::to_string(::getpid()));
  fs::remove_all(d);
  RunResult r = run(bin("salvor") + " decode " + cap.string() + " --out " + d.string() + " --detector viterbi -q");
  if (r.exit_code != 4) throw std::runtime_error("first pass: " + r.out);
  return d;
}

}  // namespace

TEST(RetryE2E, RecoversMoreNeverWorseAndIsIdempotent) {
  fs::path cap = synth("demo", "", "demo");
  fs::path first = first_pass(cap);
  fs::path dir = scratch("retry") / "r";
  fs::create_directories(dir);
  fs::copy(first, dir, fs::copy_options::recursive);
  std::set<uint64_t> before = verified(dir);
  ASSERT_GT(before.size(), 700u);
  RunResult r = run(bin("salvor") + " retry " + dir.string() + " --detectors pdnp --json -q");
  ASSERT_TRUE(r.exit_code == 0 || r.exit_code == 4) << r.out;
  nlohmann::json j = nlohmann::json::parse(r.out);
  std::set<uint64_t> after = verified(dir);
  EXPECT_GT(after.size(), before.size()) << "retry recovered nothing";
  for (uint64_t lba : before) EXPECT_TRUE(after.count(lba)) << "verified sector " << lba << " lost";
  EXPECT_EQ(silent_errors(dir, cap), 0);
  EXPECT_EQ(j["retry"]["recovered"].get<size_t>(), after.size() - before.size());
  // The order of strategies is recorded in run.json; each attempt names its strategy.
  nlohmann::json run_json = read_json(dir / "run.json");
  ASSERT_FALSE(run_json["retry_history"].empty());
  EXPECT_EQ(run_json["retry_history"][0]["strategy"], "pdnp");
  const nlohmann::json final_map = read_json(dir / "damage-map.json");
  for (const auto& s : final_map["sectors"]) {
    if (s["lba"].get<uint64_t>() && !before.count(s["lba"].get<uint64_t>()) && after.count(s["lba"].get<uint64_t>())) {
      EXPECT_EQ(s["attempt"].get<std::string>().rfind("retry:", 0), 0u) << s.dump();
    }
  }

  // Nothing new to try: the folder stays byte for byte the same.
  std::string digest = folder_digest(dir);
  RunResult again = run(bin("salvor") + " retry " + dir.string() + " --detectors pdnp --json -q");
  EXPECT_TRUE(again.exit_code == 0 || again.exit_code == 4) << again.out;
  EXPECT_TRUE(nlohmann::json::parse(again.out)["retry"]["nothing_to_do"].get<bool>());
  EXPECT_TRUE(folder_digest(dir) == digest) << "a second retry changed the folder";
}

// Killed at random moments, retry leaves a folder that opens, has lost no verified
// sector and holds no silent error; run again, it carries on from its history.
TEST(RetryE2E, KilledAtRandomPointsLosesNothing) {
  fs::path cap = synth("demo", "", "demo");
  fs::path first = first_pass(cap);
  fs::path dir = scratch("retry-kill") / "r";
  fs::create_directories(dir);
  fs::copy(first, dir, fs::copy_options::recursive);
  const std::set<uint64_t> base = verified(dir);
  ASSERT_GT(base.size(), 700u);
  std::mt19937 rng(23);
  for (int k = 0; k < 3; ++k) {
    pid_t pid = fork();
    ASSERT_GE(pid, 0);
    if (pid == 0) {
      std::string salvor = bin("salvor");
      execl(salvor.c_str(), salvor.c_str(), "retry", dir.c_str(), "--detectors", "pdnp", "-q", static_cast<char*>(nullptr));
      _exit(127);
    }
    std::this_thread::sleep_for(std::chrono::milliseconds(1500 + rng() % 6000));
    kill(pid, SIGKILL);
    waitpid(pid, nullptr, 0);
    std::set<uint64_t> now = verified(dir);
    for (uint64_t lba : base) EXPECT_TRUE(now.count(lba)) << "kill " << k << ": verified sector " << lba << " lost";
    EXPECT_EQ(silent_errors(dir, cap), 0) << "kill " << k;
    EXPECT_NO_THROW(read_json(dir / "run.json"));
    EXPECT_NO_THROW(read_jsonl(dir / "sectors.jsonl"));
    EXPECT_EQ(fs::file_size(dir / "image.bin"), 768u * 512u);
  }
  RunResult r = run(bin("salvor") + " retry " + dir.string() + " --detectors pdnp -q");
  EXPECT_TRUE(r.exit_code == 0 || r.exit_code == 4) << r.out;
  EXPECT_GE(verified(dir).size(), base.size());
  EXPECT_EQ(silent_errors(dir, cap), 0);
}

TEST(RetryE2E, BadInputs) {
  fs::path dir = scratch("retry-bad");
  EXPECT_EQ(run(bin("salvor") + " retry " + (dir / "nothing").string()).exit_code, 3);
  EXPECT_EQ(run(bin("salvor") + " retry").exit_code, 2);
  fs::path cap = synth("tiny", "", "tiny-retry");
  fs::path out = dir / "o";
  ASSERT_EQ(run(bin("salvor") + " decode " + cap.string() + " --out " + out.string() + " -q").exit_code, 4);
  EXPECT_EQ(run(bin("salvor") + " retry " + out.string() + " --detectors nosuch").exit_code, 2);
  // A capture changed after the decode is refused.
  nlohmann::json m = read_json(cap / "manifest.json");
  fs::path c = cap / m["captures"][0]["path"].get<std::string>();
  fs::path copy = dir / "orig";
  fs::copy_file(c, copy);
  { std::ofstream(c, std::ios::app) << "x"; }
  RunResult r = run(bin("salvor") + " retry " + out.string());
  fs::copy_file(copy, c, fs::copy_options::overwrite_existing);
  EXPECT_EQ(r.exit_code, 3) << r.out;
  EXPECT_NE(r.out.find("changed since the decode"), std::string::npos) << r.out;
}

// Three revolutions of a track with independent electronic noise (no media noise),
// aligned in the waveform by cross-correlation and averaged: the decoder's SNR estimate
// rises by at least 3 dB over the best single revolution (10 log10(3) = 4.8 dB ideal).
TEST(RetryE2E, CombiningThreeRevolutionsGainsThreeDb) {
  fs::path cap = synth(std::string(SALVOR_SOURCE_DIR) + "/tests/e2e/data/combine.toml", "", "combine");
  nlohmann::json m = read_json(cap / "manifest.json");
  std::vector<fs::path> revs;
  for (const auto& c : m["captures"]) revs.push_back(cap / c["path"].get<std::string>());
  ASSERT_EQ(revs.size(), 3u);
  fs::path dir = scratch("combine");
  auto median_snr = [&](const fs::path& capture, const std::string& tag) {
    fs::path out = dir / tag;
    RunResult r = run(bin("salvor") + " decode " + capture.string() + " --format " + (cap / "format.toml").string() +
                      " --detector pdnp --out " + out.string() + " -q");
    EXPECT_TRUE(r.exit_code == 0 || r.exit_code == 4) << r.out;
    std::vector<double> v;
    for (const auto& a : read_jsonl(out / "sectors.jsonl")) v.push_back(a["snr_db"].get<double>());
    EXPECT_GE(v.size(), 10u) << tag;
    std::nth_element(v.begin(), v.begin() + static_cast<long>(v.size() / 2), v.end());
    return v.empty() ? 0.0 : v[v.size() / 2];
  };
  double best_single = -1e9;
  for (size_t r = 0; r < revs.size(); ++r) best_single = std::max(best_single, median_snr(revs[r], "r" + std::to_string(r)));
  salvor::pipeline::CombinedCapture cc = salvor::pipeline::combine_revolutions(revs);
  for (double lag : cc.lag_rms) EXPECT_LT(lag, 0.5) << "alignment jumps between segments";
  fs::path combined = dir / "combined.w64";
  salvor::pipeline::write_combined_capture(cc, revs[0], {0, 1, 2}, combined);
  double comb = median_snr(combined, "combined");
  std::printf("median SNR: best single revolution %.2f dB, three combined %.2f dB\n", best_single, comb);
  EXPECT_GE(comb - best_single, 3.0);

  // Through retry: the combined strategy records attempts that used all three revolutions.
  fs::path first = dir / "first";
  ASSERT_EQ(run(bin("salvor") + " decode " + cap.string() + " --out " + first.string() + " --detector viterbi -q").exit_code, 4);
  RunResult r = run(bin("salvor") + " retry " + first.string() + " --detectors pdnp -q");
  EXPECT_TRUE(r.exit_code == 0 || r.exit_code == 4) << r.out;
  bool combined_attempt = false;
  for (const auto& a : read_jsonl(first / "sectors.jsonl"))
    if (a["attempt"] == "retry:pdnp/combined") {
      combined_attempt = true;
      EXPECT_EQ(a["revolutions"].size(), 3u);
    }
  EXPECT_TRUE(combined_attempt);
}
