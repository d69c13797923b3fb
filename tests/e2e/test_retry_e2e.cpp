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
  for (const auto& s : final_map["sectors"])
    if (s["lba"].get<uint64_t>() && !before.count(s["lba"].get<uint64_t>()) && after.count(s["lba"].get<uint64_t>()))
      EXPECT_EQ(s["attempt"].get<std::string>().rfind("retry:", 0), 0u) << s.dump();

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
