#include <gtest/gtest.h>

#include <cstdio>
#include <filesystem>
#include <fstream>
#include <random>

#include "common/error.hpp"
#include "results/confidence.hpp"
#include "results/damage_map.hpp"
#include "results/decode_folder.hpp"

using namespace salvor::results;
namespace fs = std::filesystem;

static SectorAttempt make(uint64_t lba, SectorStatus st, std::vector<int> corr, std::vector<int> eras,
                          double weak) {
  SectorAttempt a;
  a.lba = lba;
  a.status = st;
  a.rs_corrected = std::move(corr);
  a.rs_erasures = std::move(eras);
  a.rs_capacity = 16;
  a.low_reliability_fraction = weak;
  a.confidence = sector_confidence(a);
  return a;
}

TEST(Confidence, OrdersByCorrectionMarginAndSeparatesStatuses) {
  auto good = make(0, SectorStatus::good, {0, 0, 0}, {0, 0, 0}, 0.0);
  auto light = make(0, SectorStatus::corrected, {2, 0, 1}, {0, 0, 0}, 0.01);
  auto heavy = make(0, SectorStatus::corrected, {8, 3, 5}, {0, 0, 0}, 0.05);
  auto full = make(0, SectorStatus::corrected, {8, 8, 8}, {0, 0, 0}, 1.0);
  auto fail_clean = make(0, SectorStatus::failed, {-1, 0, 0}, {0, 0, 0}, 0.0);
  auto fail_bad = make(0, SectorStatus::failed, {-1, -1, -1}, {0, 0, 0}, 0.6);
  auto missing = make(0, SectorStatus::missing, {}, {}, 0.0);
  EXPECT_DOUBLE_EQ(good.confidence, 1.0);
  EXPECT_GT(good.confidence, light.confidence);
  EXPECT_GT(light.confidence, heavy.confidence);
  EXPECT_GT(heavy.confidence, full.confidence);
  // Any verified sector is above any failed one, whatever its evidence.
  EXPECT_GT(full.confidence, 0.5);
  EXPECT_LT(fail_clean.confidence, 0.5);
  EXPECT_GT(fail_clean.confidence, fail_bad.confidence);
  EXPECT_EQ(missing.confidence, 0.0);
  // Random sweep: the separation holds for every combination.
  std::mt19937 rng(5);
  for (int i = 0; i < 2000; ++i) {
    std::vector<int> c(3), e(3);
    for (int k = 0; k < 3; ++k) {
      e[k] = rng() % 17;
      c[k] = e[k] + static_cast<int>(rng() % 9);
    }
    double w = (rng() % 1000) / 1000.0;
    EXPECT_GT(make(0, SectorStatus::corrected, c, e, w).confidence, 0.5);
    EXPECT_LT(make(0, SectorStatus::failed, c, e, w).confidence, 0.5);
  }
}

TEST(BestAttempt, VerifiedIsNeverReplacedByUnverified) {
  auto verified = make(0, SectorStatus::corrected, {8, 8, 8}, {0, 0, 0}, 1.0);
  auto failed = make(0, SectorStatus::failed, {-1, 0, 0}, {0, 0, 0}, 0.0);
  failed.confidence = 0.99;  // even an absurdly confident unverified attempt loses
  EXPECT_TRUE(better_than(verified, failed));
  EXPECT_FALSE(better_than(failed, verified));
}

static Geometry geo() { return Geometry{2, 3, 4, 16}; }

static fs::path fresh_dir(const char* name) {
  fs::path d = fs::temp_directory_path() / name;
  fs::remove_all(d);
  return d;
}

TEST(DecodeFolder, WritesAllFilesAndReadsThemBack) {
  fs::path dir = fresh_dir("salvor_results_folder");
  DecodeFolder f(dir, geo());
  std::vector<uint8_t> data(16);
  for (int i = 0; i < 16; ++i) data[i] = static_cast<uint8_t>(i + 1);
  auto a = make(5, SectorStatus::good, {0, 0, 0}, {0, 0, 0}, 0.0);
  a.data = data;
  a.cylinder = 0; a.head = 1; a.sector = 1;
  EXPECT_TRUE(f.record(a));
  auto b = make(7, SectorStatus::failed, {-1, 0, 0}, {0, 0, 0}, 0.2);
  b.data = std::vector<uint8_t>(16, 0xAB);
  b.cylinder = 0; b.head = 1; b.sector = 3;
  EXPECT_TRUE(f.record(b));
  f.run_info()["salvor"] = "test";
  std::string sha = f.write(FillPolicy{});
  for (const char* n : {"image.bin", "sectors.jsonl", "damage-map.json", "damage-map.svg", "run.json"})
    EXPECT_TRUE(fs::exists(dir / n)) << n;
  EXPECT_EQ(fs::file_size(dir / "image.bin"), geo().total_sectors() * 16);
  EXPECT_EQ(sha.size(), 64u);

  DecodeFolder g = DecodeFolder::open(dir);
  EXPECT_EQ(g.final_attempt(5).status, SectorStatus::good);
  EXPECT_EQ(g.final_attempt(5).data, data);
  EXPECT_EQ(g.final_attempt(7).status, SectorStatus::failed);
  EXPECT_EQ(g.final_attempt(7).data, std::vector<uint8_t>(16, 0xAB));
  EXPECT_EQ(g.final_attempt(0).status, SectorStatus::missing);
  // The missing sector holds the documented text marker.
  std::string m(g.final_attempt(0).data.begin(), g.final_attempt(0).data.end());
  EXPECT_EQ(m.substr(0, 16), "<salvor missing ");

  // A worse attempt is logged but does not replace the verified one; writing again
  // appends to the log without duplicating the earlier lines.
  auto worse = make(5, SectorStatus::failed, {-1, 0, 0}, {0, 0, 0}, 0.0);
  worse.data = std::vector<uint8_t>(16, 0);
  EXPECT_FALSE(g.record(worse));
  g.write(FillPolicy{});
  DecodeFolder h = DecodeFolder::open(dir);
  EXPECT_EQ(h.final_attempt(5).data, data);
  std::ifstream log(dir / "sectors.jsonl");
  int lines = 0;
  for (std::string l; std::getline(log, l);) ++lines;
  EXPECT_EQ(lines, 3);
  fs::remove_all(dir);
}

TEST(DecodeFolder, FillPolicyForUnverified) {
  fs::path dir = fresh_dir("salvor_results_fill");
  DecodeFolder f(dir, geo());
  auto b = make(2, SectorStatus::failed, {-1, 0, 0}, {0, 0, 0}, 0.2);
  b.data = std::vector<uint8_t>(16, 0xAB);
  f.record(b);
  FillPolicy p;
  p.fill_unverified = true;
  p.fill_byte = 0xE5;
  f.write(p);
  std::ifstream in(dir / "image.bin", std::ios::binary);
  std::vector<char> img((std::istreambuf_iterator<char>(in)), std::istreambuf_iterator<char>());
  for (int i = 0; i < 16; ++i) EXPECT_EQ(static_cast<uint8_t>(img[2 * 16 + i]), 0xE5);
  fs::remove_all(dir);
}

TEST(DecodeFolder, OpenRefusesInconsistentFolder) {
  fs::path dir = fresh_dir("salvor_results_bad");
  EXPECT_THROW(DecodeFolder::open(dir), salvor::Error);
  DecodeFolder f(dir, geo());
  f.write(FillPolicy{});
  fs::resize_file(dir / "image.bin", 10);
  try {
    DecodeFolder::open(dir);
    FAIL() << "truncated image accepted";
  } catch (const salvor::Error& e) {
    EXPECT_NE(std::string(e.what()).find("image.bin"), std::string::npos);
    EXPECT_EQ(e.kind(), salvor::ErrorKind::input);
  }
  fs::remove_all(dir);
}

// The SVG must be well-formed XML with one panel per head and a legend; checked with
// Python's xml.etree (Debian's interpreter) as an independent parser.
TEST(DamageMap, SvgIsWellFormedAndComplete) {
  Geometry g{2, 120, 2000, 512};  // thousands of sectors per track: cells shrink, runs merge
  std::vector<SectorAttempt> all(g.total_sectors());
  uint64_t lba = 0;
  for (int c = 0; c < g.cylinders; ++c)
    for (int h = 0; h < g.heads; ++h)
      for (int s = 0; s < g.sectors_per_track; ++s, ++lba) {
        all[lba].lba = lba; all[lba].cylinder = c; all[lba].head = h; all[lba].sector = s;
        all[lba].status = (c > 100 && c < 110 && h == 1) ? SectorStatus::failed : SectorStatus::good;
      }
  std::string svg = damage_map_svg(g, all, "test & <map>");
  EXPECT_LT(svg.size(), 2u << 20);  // run merging keeps it small
  fs::path p = fs::temp_directory_path() / "salvor_map_test.svg";
  { std::ofstream(p) << svg; }
  std::string cmd = std::string(SALVOR_ORACLE_PYTHON) +
                    " -c \"import sys,xml.etree.ElementTree as E; r=E.parse(sys.argv[1]).getroot();"
                    " ns='{http://www.w3.org/2000/svg}'; g=[x for x in r.iter(ns+'g') if x.get('class')=='head'];"
                    " l=[x for x in r.iter(ns+'g') if x.get('class')=='legend']; sys.exit(0 if len(g)==2 and len(l)==1 else 1)\" " +
                    p.string();
  EXPECT_EQ(std::system(cmd.c_str()), 0);
  auto j = damage_map_json(g, all);
  EXPECT_EQ(j["counts"]["failed"].get<uint64_t>(), 9u * 2000u);
  EXPECT_EQ(j["counts"]["total"].get<uint64_t>(), g.total_sectors());
  fs::remove(p);
}
