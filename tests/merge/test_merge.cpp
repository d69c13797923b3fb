// salvor merge, end to end: shards of one job merge to the single run's result, a
// constructed conflict keeps both attempts, tampered or mismatched sources are refused.

#include <gtest/gtest.h>
#include <unistd.h>
#include <sys/wait.h>

#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <set>
#include <sstream>
#include <string>

#include <nlohmann/json.hpp>

#include "cli_test_util.hpp"
#include "common/sha256.hpp"
#include "results/decode_folder.hpp"

namespace fs = std::filesystem;
using salvor::results::DecodeFolder;
using salvor::results::Geometry;
using salvor::results::SectorAttempt;
using salvor::results::SectorStatus;

namespace {

const std::string kSalvor = std::string(SALVOR_BIN_DIR) + "/salvor";
const std::string kSynth = std::string(SALVOR_BIN_DIR) + "/salvor-synth";

using cli_test::CmdResult;
using cli_test::read_json;
using cli_test::run;
using cli_test::scratch_root;
using cli_test::slurp;

std::vector<nlohmann::json> read_log(const fs::path& dir) {
  std::vector<nlohmann::json> out;
  std::ifstream in(dir / "sectors.jsonl");
  std::string line;
  while (std::getline(in, line))
    if (!line.empty()) out.push_back(nlohmann::json::parse(line));
  return out;
}

// A small decode folder written through DecodeFolder (the same code a decode uses).
struct Sector {
  int lba;
  SectorStatus status;
  double confidence;
  uint8_t fill;  // the data bytes
};
void make_folder(const fs::path& dir, const Geometry& g, const std::vector<Sector>& sectors,
                 const std::string& format_name = "tiny-test") {
  DecodeFolder f(dir, g);
  for (const auto& s : sectors) {
    SectorAttempt a;
    a.lba = static_cast<uint64_t>(s.lba);
    a.cylinder = s.lba / (g.heads * g.sectors_per_track);
    a.head = (s.lba / g.sectors_per_track) % g.heads;
    a.sector = s.lba % g.sectors_per_track;
    a.status = s.status;
    a.confidence = s.confidence;
    a.detector = "viterbi";
    a.header_ok = true;
    a.crc = salvor::results::is_verified(s.status) ? "pass" : "fail";
    a.data.assign(static_cast<size_t>(g.sector_bytes), s.fill);
    f.record(a);
  }
  f.run_info()["salvor_run"] = 1;
  f.run_info()["command"] = "decode";
  f.run_info()["format"] = {{"name", format_name}, {"path", ""}};
  f.write(salvor::results::FillPolicy{});
}

const Geometry kSmall{1, 2, 4, 32};  // heads, cylinders, sectors per track, bytes

}  // namespace

// Shards: head 0 and head 1 of the clean scenario decoded separately, merged, must equal
// one decode of both (status and bytes of every sector). This also requires the decode to
// be deterministic.
TEST(Merge, ShardsEqualTheSingleRun) {
  const fs::path root = scratch_root() / "shards";
  const fs::path cap = root / "capture";
  ASSERT_EQ(run(kSynth + " --scenario clean --out '" + cap.string() + "' --tracks 0:0,0:1 --revolutions 1 --quiet").code, 0);
  const std::string c0 = (cap / "captures" / "c000-h0-r0.flac").string(), c1 = (cap / "captures" / "c000-h1-r0.flac").string();
  ASSERT_TRUE(fs::exists(c0) && fs::exists(c1));
  const fs::path a = root / "A", b = root / "B", c = root / "C", m = root / "M";
  ASSERT_EQ(run(kSalvor + " decode '" + c0 + "' --format tf1-512 --threads 1 -q --out '" + a.string() + "'").code, 4);
  ASSERT_EQ(run(kSalvor + " decode '" + c1 + "' --format tf1-512 --threads 1 -q --out '" + b.string() + "'").code, 4);
  ASSERT_EQ(run(kSalvor + " decode '" + cap.string() + "' --threads 2 -q --out '" + c.string() + "'").code, 4);
  CmdResult r = run(kSalvor + " merge '" + a.string() + "' '" + b.string() + "' --out '" + m.string() + "'");
  ASSERT_EQ(r.code, 4) << r.err;  // the image has 768 sectors, only 32 captured

  const auto map_c = read_json(c / "damage-map.json"), map_m = read_json(m / "damage-map.json");
  ASSERT_EQ(map_c["sectors"].size(), map_m["sectors"].size());
  int verified = 0;
  for (size_t i = 0; i < map_c["sectors"].size(); ++i) {
    EXPECT_EQ(map_c["sectors"][i]["status"], map_m["sectors"][i]["status"]) << "lba " << i;
    EXPECT_DOUBLE_EQ(map_c["sectors"][i]["confidence"].get<double>(), map_m["sectors"][i]["confidence"].get<double>());
    const std::string st = map_m["sectors"][i]["status"];
    verified += st == "good" || st == "corrected";
  }
  EXPECT_GE(verified, 30) << "the clean scenario should decode nearly every sector of the two tracks";
  EXPECT_EQ(slurp(c / "image.bin"), slurp(m / "image.bin")) << "merged image differs from the single run";

  // The log keeps every attempt of both sources, tagged with its source.
  const auto la = read_log(a), lb = read_log(b), lm = read_log(m);
  ASSERT_EQ(lm.size(), la.size() + lb.size());
  for (size_t i = 0; i < lm.size(); ++i) EXPECT_EQ(lm[i]["source"], i < la.size() ? a.string() : b.string());

  // run.json names both sources with the SHA-256 of their files (checked here independently).
  const auto run_m = read_json(m / "run.json");
  ASSERT_EQ(run_m["command"], "merge");
  ASSERT_EQ(run_m["sources"].size(), 2u);
  for (size_t i = 0; i < 2; ++i) {
    const fs::path src = i == 0 ? a : b;
    for (const char* f : {"image.bin", "sectors.jsonl", "damage-map.json", "damage-map.svg", "run.json"})
      EXPECT_EQ(run_m["sources"][i]["files"][f]["sha256"], salvor::sha256_file_hex(src / f)) << src << "/" << f;
  }
  // And the merged folder is itself a valid source (it can be reopened and merged again).
  EXPECT_NO_THROW(DecodeFolder::open(m));
  EXPECT_EQ(run(kSalvor + " merge '" + m.string() + "' '" + a.string() + "' --out '" + (root / "M2").string() + "'").code, 4);
  EXPECT_EQ(slurp(m / "image.bin"), slurp(root / "M2" / "image.bin"));
}

TEST(Merge, ConflictKeepsBothAttempts) {
  const fs::path root = scratch_root() / "conflict";
  const fs::path a = root / "A", b = root / "B", m = root / "M";
  // lba 0: same bytes in both (A good, B corrected); lba 1: both good, different bytes;
  // lba 2: failed in A, corrected in B; lba 5: failed in both (B more confident).
  make_folder(a, kSmall, {{0, SectorStatus::good, 1.0, 0x11}, {1, SectorStatus::good, 1.0, 0x22},
                          {2, SectorStatus::failed, 0.3, 0x33}, {5, SectorStatus::failed, 0.2, 0x55}});
  make_folder(b, kSmall, {{0, SectorStatus::corrected, 0.9, 0x11}, {1, SectorStatus::good, 1.0, 0x23},
                          {2, SectorStatus::corrected, 0.8, 0x34}, {5, SectorStatus::failed, 0.4, 0x56}});
  CmdResult r = run(kSalvor + " merge '" + a.string() + "' '" + b.string() + "' --out '" + m.string() + "'");
  ASSERT_EQ(r.code, 4) << r.err;
  EXPECT_NE(r.err.find("conflict"), std::string::npos) << r.err;

  const auto map = read_json(m / "damage-map.json");
  auto status = [&](int lba) { return map["sectors"][static_cast<size_t>(lba)]["status"].get<std::string>(); };
  EXPECT_EQ(status(0), "good");
  EXPECT_EQ(status(1), "conflict");
  EXPECT_EQ(status(2), "corrected");
  EXPECT_EQ(status(3), "missing");
  EXPECT_EQ(status(5), "failed");
  EXPECT_EQ(map["counts"]["conflict"], 1);

  // Image: the winner's bytes; a conflict holds the earlier source's (equal confidence).
  const std::string img = slurp(m / "image.bin");
  ASSERT_EQ(img.size(), kSmall.total_sectors() * 32);
  EXPECT_EQ(img.substr(0 * 32, 32), std::string(32, '\x11'));
  EXPECT_EQ(img.substr(1 * 32, 32), std::string(32, '\x22'));
  EXPECT_EQ(img.substr(2 * 32, 32), std::string(32, '\x34'));
  EXPECT_EQ(img.substr(5 * 32, 32), std::string(32, '\x56'));
  EXPECT_EQ(img.substr(3 * 32, 12), "<salvor miss");  // the fill marker of a missing sector

  // Both verified attempts at lba 1 are in the log, tagged; plus the merge's own line.
  std::set<std::string> sources;
  bool merge_line = false;
  for (const auto& l : read_log(m)) {
    if (l["lba"] != 1) continue;
    if (l["source"] == "merge") {
      merge_line = true;
      EXPECT_EQ(l["status"], "conflict");
    } else {
      EXPECT_EQ(l["status"], "good");
      sources.insert(l["source"].get<std::string>());
    }
  }
  EXPECT_EQ(sources, (std::set<std::string>{a.string(), b.string()}));
  EXPECT_TRUE(merge_line);

  // A reopened merge keeps the conflict, and merging it again with A keeps it too.
  DecodeFolder back = DecodeFolder::open(m);
  EXPECT_EQ(back.final_attempt(1).status, SectorStatus::conflict);
  EXPECT_EQ(run(kSalvor + " merge '" + m.string() + "' '" + a.string() + "' --out '" + (root / "M2").string() + "'").code, 4);
  EXPECT_EQ(read_json(root / "M2" / "damage-map.json")["sectors"][1]["status"], "conflict");
}

TEST(Merge, AllVerifiedExitsZeroAndJson) {
  const fs::path root = scratch_root() / "allgood";
  std::vector<Sector> first, second;
  for (int lba = 0; lba < 8; ++lba) (lba < 4 ? first : second).push_back({lba, SectorStatus::good, 1.0, static_cast<uint8_t>(lba)});
  make_folder(root / "A", kSmall, first);
  make_folder(root / "B", kSmall, second);
  const std::string out = (root / "M").string();
  const std::string cmd = "SALVOR_PLUGIN_PATH='" + std::string(SALVOR_PLUGIN_BUILD_DIR) + "' " + kSalvor + " merge '" +
                          (root / "A").string() + "' '" + (root / "B").string() + "' --json --out '" + out + "' > '" +
                          (root / "summary.json").string() + "'";
  int st = std::system(cmd.c_str());
  ASSERT_TRUE(WIFEXITED(st));
  EXPECT_EQ(WEXITSTATUS(st), 0);
  const auto j = read_json(root / "summary.json");
  EXPECT_EQ(j["good"], 8);
  EXPECT_EQ(j["conflict"], 0);
  EXPECT_EQ(j["sources"], 2);
}

TEST(Merge, TamperedSourceRefused) {
  const fs::path root = scratch_root() / "tamper";
  make_folder(root / "A", kSmall, {{0, SectorStatus::good, 1.0, 0x11}});
  make_folder(root / "B", kSmall, {{1, SectorStatus::good, 1.0, 0x22}});
  fs::copy(root / "A", root / "T", fs::copy_options::recursive);
  {  // one byte of the image changed after the decode wrote it
    std::fstream f(root / "T" / "image.bin", std::ios::in | std::ios::out | std::ios::binary);
    f.seekp(5);
    f.put('\x7f');
  }
  CmdResult r = run(kSalvor + " merge '" + (root / "T").string() + "' '" + (root / "B").string() + "' --out '" +
              (root / "M").string() + "'");
  EXPECT_EQ(r.code, 3);
  EXPECT_NE(r.err.find("image.bin"), std::string::npos) << r.err;
  EXPECT_NE(r.err.find("tampered"), std::string::npos) << r.err;
  EXPECT_FALSE(fs::exists(root / "M" / "run.json"));

  // A log line edited (a failed sector made "good") is refused the same way.
  fs::copy(root / "A", root / "L", fs::copy_options::recursive);
  {
    std::string log = slurp(root / "L" / "sectors.jsonl");
    log += log;  // a duplicated attempt
    std::ofstream(root / "L" / "sectors.jsonl", std::ios::binary) << log;
  }
  r = run(kSalvor + " merge '" + (root / "L").string() + "' '" + (root / "B").string() + "' --out '" + (root / "M").string() + "'");
  EXPECT_EQ(r.code, 3);
  EXPECT_NE(r.err.find("sectors.jsonl"), std::string::npos) << r.err;

  // run.json without the outputs record: refused, not trusted.
  fs::copy(root / "A", root / "N", fs::copy_options::recursive);
  {
    auto j = read_json(root / "N" / "run.json");
    j.erase("outputs");
    std::ofstream(root / "N" / "run.json") << j.dump();
  }
  r = run(kSalvor + " merge '" + (root / "N").string() + "' '" + (root / "B").string() + "' --out '" + (root / "M").string() + "'");
  EXPECT_EQ(r.code, 3);
  EXPECT_NE(r.err.find("outputs"), std::string::npos) << r.err;
}

TEST(Merge, DifferentGeometryOrFormatRefused) {
  const fs::path root = scratch_root() / "geometry";
  make_folder(root / "A", kSmall, {{0, SectorStatus::good, 1.0, 0x11}});
  make_folder(root / "G", Geometry{2, 2, 4, 32}, {{0, SectorStatus::good, 1.0, 0x11}});
  make_folder(root / "F", kSmall, {{0, SectorStatus::good, 1.0, 0x11}}, "other-format");
  CmdResult r = run(kSalvor + " merge '" + (root / "A").string() + "' '" + (root / "G").string() + "' --out '" + (root / "M").string() + "'");
  EXPECT_EQ(r.code, 3);
  EXPECT_NE(r.err.find("geometry"), std::string::npos) << r.err;
  r = run(kSalvor + " merge '" + (root / "A").string() + "' '" + (root / "F").string() + "' --out '" + (root / "M").string() + "'");
  EXPECT_EQ(r.code, 3);
  EXPECT_NE(r.err.find("format"), std::string::npos) << r.err;
  EXPECT_FALSE(fs::exists(root / "M"));
}

TEST(Merge, BadCommandLines) {
  const fs::path root = scratch_root() / "cli";
  make_folder(root / "A", kSmall, {{0, SectorStatus::good, 1.0, 0x11}});
  const std::string a = (root / "A").string();
  EXPECT_EQ(run(kSalvor + " merge --out '" + (root / "M").string() + "'").code, 2);        // no sources
  EXPECT_EQ(run(kSalvor + " merge '" + a + "'").code, 2);                                     // no --out
  EXPECT_EQ(run(kSalvor + " merge '" + a + "' --out '" + a + "'").code, 2);                   // --out holds a decode
  EXPECT_EQ(run(kSalvor + " merge '" + a + "' '" + a + "' --out '" + (root / "M").string() + "'").code, 2);  // twice
  CmdResult r = run(kSalvor + " merge '" + (root / "nope").string() + "' --out '" + (root / "M").string() + "'");
  EXPECT_EQ(r.code, 3);
  EXPECT_NE(r.err.find("nope"), std::string::npos);
  fs::create_directories(root / "empty");
  r = run(kSalvor + " merge '" + (root / "empty").string() + "' --out '" + (root / "M").string() + "'");
  EXPECT_EQ(r.code, 3);
  EXPECT_NE(r.err.find("run.json"), std::string::npos) << r.err;
  EXPECT_EQ(run(kSalvor + " merge --bogus").code, 2);
  EXPECT_EQ(run(kSalvor + " merge --help").code, 0);
}
