// salvor compare on the committed corpus subset: every output file is written, and the
// numbers agree with counts made here independently, from the decode folders the run
// keeps (image.bin, damage-map.json, sectors.jsonl) and the truth images; the bit error
// count is checked against a decode made here with the whole-track reference encoder as
// truth. Also: silent errors are loud and give exit 4, bad inputs give the documented codes.

#include <gtest/gtest.h>
#include <unistd.h>
#include <sys/wait.h>

#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <map>
#include <set>
#include <sstream>

#include <nlohmann/json.hpp>

#include "cli_test_util.hpp"
#include "common/sha256.hpp"
#include "compare/corpus.hpp"
#include "compare/run_compare.hpp"
#include "equalize/targets.hpp"
#include "detect/plugin_host.hpp"
#include "format/track_codec.hpp"
#include "format/track_format.hpp"
#include "pipeline/capture_decoder.hpp"
#include "pipeline/decode_job.hpp"
#include "pipeline/job.hpp"

namespace fs = std::filesystem;
using namespace salvor;

namespace {

const std::string kSalvor = std::string(SALVOR_BIN_DIR) + "/salvor";
const fs::path kSubset = fs::path(SALVOR_SOURCE_DIR) / "corpora" / "corpus" / "subset";

using cli_test::CmdResult;
using cli_test::read_json;
using cli_test::scratch_root;
using cli_test::slurp;

// salvor with these arguments.
CmdResult run(const std::string& args) { return cli_test::run(kSalvor + " " + args); }

// The comparison of the subset, run once for all tests below.
const fs::path& compare_dir() {
  static fs::path dir = [] {
    fs::path d = scratch_root() / "cmp";
    CmdResult r = run("compare '" + kSubset.string() + "' --detectors viterbi,npml --keep-decodes --threads 2 -q --out '" +
                      d.string() + "'");
    EXPECT_EQ(r.code, 0) << r.err;
    EXPECT_NE(r.out.find("detector"), std::string::npos);  // the table
    return d;
  }();
  return dir;
}

const nlohmann::json& result_for(const nlohmann::json& j, const std::string& det, const std::string& entry) {
  for (const auto& r : j["results"])
    if (r["detector"] == det && r["entry"] == entry) return r;
  throw std::runtime_error("no result for " + det + "/" + entry);
}

}  // namespace

TEST(CompareRun, WritesEveryFile) {
  const fs::path& d = compare_dir();
  for (const char* f : {"compare.md", "compare.csv", "compare.json", "failure-vs-snr.svg", "ber-vs-snr.svg",
                        "failure-vs-density.svg", "ber-vs-density.svg"}) {
    ASSERT_TRUE(fs::is_regular_file(d / f)) << f;
    EXPECT_GT(fs::file_size(d / f), 100u) << f;
  }
  const auto j = read_json(d / "compare.json");
  EXPECT_EQ(j["detectors"], (nlohmann::json{"viterbi", "npml"}));
  EXPECT_EQ(j["results"].size(), 10u);
  EXPECT_EQ(j["silent_errors"], 0);
  // CSV: a header and one row per detector and entry.
  std::istringstream csv(slurp(d / "compare.csv"));
  std::string line;
  size_t rows = 0;
  while (std::getline(csv, line)) rows += !line.empty();
  EXPECT_EQ(rows, 11u);
  // Every plot has one curve per detector.
  for (const char* f : {"failure-vs-snr.svg", "failure-vs-density.svg"}) {
    const std::string svg = slurp(d / f);
    EXPECT_NE(svg.find(">viterbi<"), std::string::npos);
    EXPECT_NE(svg.find(">npml<"), std::string::npos);
  }
  const std::string md = slurp(d / "compare.md");
  EXPECT_NE(md.find("| viterbi | base |"), std::string::npos);
  EXPECT_NE(md.find("Confidence calibration"), std::string::npos);
}

// Sector counts, byte errors after ECC, silent errors and the calibration count, each
// counted here from the kept decode folders and the truth images.
TEST(CompareRun, CountsAgreeWithAnIndependentCount) {
  const fs::path& d = compare_dir();
  const auto j = read_json(d / "compare.json");
  compare::Corpus corpus = compare::read_corpus(kSubset);
  uint64_t verified_total = 0;
  for (const std::string det : {"viterbi", "npml"}) {
    for (const auto& e : corpus.entries) {
      const fs::path folder = d / "decodes" / det / e.name;
      const auto map = read_json(folder / "damage-map.json");
      const std::string image = slurp(folder / "image.bin");
      const auto manifest = read_json(e.manifest);
      const std::string truth = slurp(e.manifest.parent_path() / manifest["truth"]["image"].get<std::string>());
      ASSERT_EQ(salvor::sha256_hex(std::as_bytes(std::span(truth.data(), truth.size()))),
                manifest["truth"]["image_sha256"].get<std::string>());
      ASSERT_EQ(image.size(), truth.size());
      std::set<std::pair<int, int>> tracks;
      for (const auto& c : manifest["captures"]) tracks.insert({c["cylinder"].get<int>(), c["head"].get<int>()});
      const size_t bytes = 512;
      uint64_t sectors = 0, verified = 0, found = 0, byte_errors = 0, silent = 0;
      for (const auto& s : map["sectors"]) {
        if (!tracks.count({s["cylinder"].get<int>(), s["head"].get<int>()})) continue;
        ++sectors;
        const std::string st = s["status"];
        const size_t lba = s["lba"].get<size_t>();
        const bool ok = st == "good" || st == "corrected";
        const std::string got = image.substr(lba * bytes, bytes), want = truth.substr(lba * bytes, bytes);
        verified += ok;
        if (st != "missing") {
          ++found;
          for (size_t k = 0; k < bytes; ++k) byte_errors += got[k] != want[k];
        }
        silent += ok && got != want;
      }
      // Attempts that were found: the lines of the log (one revolution: one per sector seen).
      uint64_t logged = 0;
      std::istringstream log(slurp(folder / "sectors.jsonl"));
      std::string line;
      while (std::getline(log, line))
        if (!line.empty() && nlohmann::json::parse(line)["status"] != "missing") ++logged;

      const auto& r = result_for(j, det, e.name);
      SCOPED_TRACE(det + "/" + e.name);
      EXPECT_EQ(r["sectors"].get<uint64_t>(), sectors);
      EXPECT_EQ(r["verified"].get<uint64_t>(), verified);
      EXPECT_EQ(r["found"].get<uint64_t>(), found);
      EXPECT_EQ(r["byte_errors"].get<uint64_t>(), byte_errors);
      EXPECT_EQ(r["bytes_compared"].get<uint64_t>(), found * bytes);
      EXPECT_EQ(r["silent_errors"].get<uint64_t>(), silent);
      EXPECT_EQ(r["calibration_count"].get<uint64_t>(), logged);
      EXPECT_NEAR(r["verified_share"].get<double>(), static_cast<double>(verified) / sectors, 1e-12);
      verified_total += verified;
    }
  }
  // The subset is not trivial: something verifies and something does not.
  EXPECT_GT(verified_total, 0u);
  EXPECT_LT(verified_total, 2u * 5u * 16u);
}

// The bit error count before ECC, against a decode made here (same settings) with the
// truth taken from the whole-track reference encoder at the layout's positions.
TEST(CompareRun, BitErrorsAgreeWithADirectDecode) {
  const auto j = read_json(compare_dir() / "compare.json");
  compare::Corpus corpus = compare::read_corpus(kSubset);
  detect::PluginHost host({SALVOR_PLUGIN_BUILD_DIR});
  for (const auto& e : corpus.entries) {
    pipeline::Job job = pipeline::read_manifest(e.manifest);
    format::TrackFormat fmt = pipeline::resolve_job_format(job, "");
    const std::string truth = slurp(job.truth->image);
    const std::vector<uint8_t> image(truth.begin(), truth.end());
    const auto layout = format::layout_track(fmt);
    pipeline::DecodeSettings s;
    s.detector = "viterbi";
    s.keep_channel_bits = true;
    pipeline::CaptureDecoder decoder(fmt, host, s);
    uint64_t compared = 0, errors = 0;
    for (const auto& cap : job.captures) {
      const auto track = format::encode_track(fmt, image, *cap.cylinder, *cap.head);
      for (const auto& a : decoder.decode(cap).sectors) {
        if (a.channel_bits.empty() || a.cylinder != *cap.cylinder || a.head != *cap.head) continue;
        const auto& sp = layout.sectors.at(static_cast<size_t>(a.sector));
        const size_t len = static_cast<size_t>(fmt.header_bits + fmt.data_bits);
        compared += len;
        for (size_t i = 0; i < len; ++i) {
          if (i >= a.channel_bits.size()) ++errors;
          else errors += a.channel_bits[i] != track[sp.header_bit + i];
        }
      }
    }
    const auto& r = result_for(j, "viterbi", e.name);
    SCOPED_TRACE(e.name);
    EXPECT_EQ(r["bits_compared"].get<uint64_t>(), compared);
    EXPECT_EQ(r["bit_errors"].get<uint64_t>(), errors);
  }
}

// A truth image altered after the fact makes correctly decoded sectors look wrong: the
// comparison must call them silent errors, loudly, with exit 4.
TEST(CompareRun, SilentErrorsAreLoud) {
  const fs::path root = scratch_root() / "silent";
  fs::create_directories(root);
  fs::copy(kSubset / "base", root / "base", fs::copy_options::recursive);
  {
    std::fstream f(root / "base" / "truth" / "image.bin", std::ios::in | std::ios::out | std::ios::binary);
    f.seekp(3 * 512 + 100);  // lba 3 (cylinder 0, head 0, sector 3)
    f.put('\x42');
    f.seekp(3 * 512 + 101);
    f.put('\x43');
  }
  auto manifest = read_json(root / "base" / "manifest.json");
  manifest["truth"]["image_sha256"] = salvor::sha256_file_hex(root / "base" / "truth" / "image.bin");
  std::ofstream(root / "base" / "manifest.json") << manifest.dump(2);
  auto corpus = read_json(kSubset / "corpus.json");
  nlohmann::json only = nlohmann::json::array();
  for (const auto& e : corpus["entries"])
    if (e["name"] == "base") only.push_back(e);
  corpus["entries"] = only;
  std::ofstream(root / "corpus.json") << corpus.dump(2);

  CmdResult r = run("compare '" + root.string() + "' --detectors viterbi -q --json --out '" + (root / "out").string() + "'");
  EXPECT_EQ(r.code, 4);
  EXPECT_NE(r.err.find("SILENT ERROR"), std::string::npos) << r.err;
  EXPECT_NE(r.err.find("lba 3 "), std::string::npos) << r.err;
  const auto j = nlohmann::json::parse(r.out);
  EXPECT_EQ(j["silent_errors"], 1);
  EXPECT_TRUE(fs::exists(root / "out" / "compare.json"));  // the report is still written
}

TEST(CompareRun, BadInputsGiveTheDocumentedCodes) {
  const fs::path root = scratch_root() / "bad";
  fs::create_directories(root / "empty");
  EXPECT_EQ(run("compare").code, 2);                                                            // no corpus
  EXPECT_EQ(run("compare '" + (root / "absent").string() + "' --out '" + (root / "o1").string() + "'").code, 3);
  CmdResult r = run("compare '" + (root / "empty").string() + "' --out '" + (root / "o2").string() + "'");
  EXPECT_EQ(r.code, 3);
  EXPECT_NE(r.err.find("corpus.json"), std::string::npos) << r.err;
  std::ofstream(root / "broken.json") << "{\"salvor_corpus\": 1, \"name\": \"b\", \"entries\": [";
  EXPECT_EQ(run("compare '" + (root / "broken.json").string() + "' --out '" + (root / "o3").string() + "'").code, 3);
  r = run("compare '" + kSubset.string() + "' --detectors no-such-detector --out '" + (root / "o4").string() + "'");
  EXPECT_EQ(r.code, 2);
  EXPECT_NE(r.err.find("no-such-detector"), std::string::npos) << r.err;
  fs::create_directories(root / "full");
  std::ofstream(root / "full" / "x") << "x";
  r = run("compare '" + kSubset.string() + "' --out '" + (root / "full").string() + "'");
  EXPECT_EQ(r.code, 2);
  EXPECT_NE(r.err.find("not empty"), std::string::npos) << r.err;
  EXPECT_EQ(run("compare --help").code, 0);
}

// "--detectors all": every loaded plugin whose declared target the equalizer registry knows.
TEST(CompareRun, AllMeansEveryPluginWithASupportedTarget) {
  detect::PluginHost host({SALVOR_PLUGIN_BUILD_DIR});
  const auto names = compare::comparable_detectors(host);
  std::set<std::string> got(names.begin(), names.end());
  EXPECT_TRUE(got.count("viterbi"));
  EXPECT_TRUE(got.count("npml"));
  for (const auto* d : host.detectors())
    EXPECT_EQ(got.count(d->name) == 1, equalize::is_known_target(d->target)) << d->name << " target " << d->target;
}
