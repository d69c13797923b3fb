// core/compare without decoding: bit counting, the truth of a sector's channel bits, the
// scorer's counts on constructed attempts, the corpus reader's errors, the SVG plot.

#include <gtest/gtest.h>
#include <unistd.h>

#include <cmath>
#include <filesystem>
#include <fstream>
#include <sstream>

#include <nlohmann/json.hpp>

#include "cli_test_util.hpp"
#include "common/error.hpp"
#include "compare/corpus.hpp"
#include "compare/score.hpp"
#include "compare/svg_plot.hpp"
#include "format/track_codec.hpp"
#include "format/track_format.hpp"

namespace fs = std::filesystem;
using namespace salvor;
using namespace salvor::compare;

namespace {

const fs::path kSubset = fs::path(SALVOR_SOURCE_DIR) / "corpora" / "corpus" / "subset";

// A fresh folder under this process's scratch folder (removed when the tests end).
fs::path temp_dir(const std::string& name) {
  fs::path p = cli_test::scratch_root() / name;
  fs::remove_all(p);
  fs::create_directories(p);
  return p;
}

std::vector<uint8_t> read_all(const fs::path& p) {
  std::ifstream in(p, std::ios::binary);
  return std::vector<uint8_t>(std::istreambuf_iterator<char>(in), {});
}

format::TrackFormat subset_format() { return format::load_track_format(kSubset / "base" / "format.toml"); }

}  // namespace

TEST(CompareBits, CountsFlipsAndMissingBits) {
  const std::vector<uint8_t> truth = {0, 1, 1, 0, 1, 0, 0, 1};
  EXPECT_EQ(count_bit_errors(truth, truth).errors, 0u);
  std::vector<uint8_t> d = truth;
  d[1] ^= 1;
  d[6] ^= 1;
  BitCount c = count_bit_errors(d, truth);
  EXPECT_EQ(c.compared, 8u);
  EXPECT_EQ(c.errors, 2u);
  // Three bits short: they count as errors.
  c = count_bit_errors(std::span<const uint8_t>(truth.data(), 5), truth);
  EXPECT_EQ(c.errors, 3u);
  // Extra bits beyond the truth are not compared.
  std::vector<uint8_t> longer = truth;
  longer.push_back(1);
  EXPECT_EQ(count_bit_errors(longer, truth).errors, 0u);
}

// The truth of a sector's header+data bits, built from the sector encoder, must be the
// same bits the whole-track reference encoder writes at the layout's header position
// (two routes through core/format that share only the field encoders).
TEST(CompareTruth, SectorBitsAgreeWithTheTrackEncoder) {
  const auto fmt = subset_format();
  const fs::path img = kSubset / "base" / "truth" / "image.bin";
  TruthImage truth(img, fmt);
  const auto image = read_all(img);
  const auto layout = format::layout_track(fmt);
  for (auto [c, h] : {std::pair{0, 0}, std::pair{5, 1}}) {
    const auto track = format::encode_track(fmt, image, c, h);
    for (const auto& sp : layout.sectors) {
      const uint64_t lba = fmt.lba(c, h, sp.sector);
      const auto bits = truth.header_data_bits(lba);
      ASSERT_EQ(bits.size(), static_cast<size_t>(fmt.header_bits + fmt.data_bits));
      ASSERT_EQ(sp.data_bit - sp.header_bit, static_cast<size_t>(fmt.header_bits));
      std::vector<uint8_t> expect(track.begin() + static_cast<long>(sp.header_bit),
                                  track.begin() + static_cast<long>(sp.header_bit + bits.size()));
      EXPECT_EQ(bits, expect) << "lba " << lba;
      const auto user = truth.sector(lba);
      EXPECT_TRUE(std::equal(user.begin(), user.end(), image.begin() + static_cast<long>(lba * fmt.user_bytes)));
    }
  }
}

TEST(CompareTruth, RefusesAWrongImage) {
  const auto fmt = subset_format();
  const fs::path d = temp_dir("truth");
  std::ofstream(d / "short.bin") << "not an image";
  EXPECT_THROW(TruthImage(d / "short.bin", fmt), Error);
  EXPECT_THROW(TruthImage(d / "absent.bin", fmt), Error);
  EXPECT_THROW(TruthImage(kSubset / "base" / "truth" / "image.bin", fmt, std::string(64, '0')), Error);  // hash
}

// The scorer's counts on attempts built by hand, against counts worked out here.
TEST(CompareScore, CountsAgainstHandWorkedValues) {
  const auto fmt = subset_format();
  TruthImage truth(kSubset / "base" / "truth" / "image.bin", fmt);
  EntryScorer scorer("viterbi", "base", fmt, truth, {{0, 0}});
  auto attempt = [&](int sector, results::SectorStatus st, double conf) {
    results::SectorAttempt a;
    a.cylinder = 0;
    a.head = 0;
    a.sector = sector;
    a.lba = fmt.lba(0, 0, sector);
    a.status = st;
    a.confidence = conf;
    a.data = truth.sector(a.lba);
    a.channel_bits = truth.header_data_bits(a.lba);
    return a;
  };
  std::vector<results::SectorAttempt> v;
  v.push_back(attempt(0, results::SectorStatus::good, 1.0));        // right
  auto a1 = attempt(1, results::SectorStatus::corrected, 0.9);      // right, 5 bit errors before ECC
  for (size_t i : {0u, 10u, 100u, 1000u, 4000u}) a1.channel_bits[i] ^= 1;
  v.push_back(a1);
  auto a2 = attempt(2, results::SectorStatus::failed, 0.3);         // wrong: 7 bytes differ
  for (size_t i = 0; i < 7; ++i) a2.data[i * 50] ^= 0x5A;
  v.push_back(a2);
  auto a3 = attempt(3, results::SectorStatus::good, 0.95);          // silent error: 1 byte
  a3.data[17] ^= 1;
  a3.channel_bits.resize(a3.channel_bits.size() - 9);               // 9 bits not delivered
  v.push_back(a3);
  auto a4 = attempt(4, results::SectorStatus::failed, 0.2);         // a second revolution of lba 4 ...
  a4.data[0] ^= 1;
  v.push_back(a4);
  auto a4b = attempt(4, results::SectorStatus::corrected, 0.8);     // ... verifies: the final result
  v.push_back(a4b);
  auto other = attempt(5, results::SectorStatus::good, 1.0);        // another track: not scored
  other.head = 1;
  other.lba = fmt.lba(0, 1, 5);
  v.push_back(other);
  scorer.add_capture(v, 1000, 0.5);
  EntryScore s = scorer.finish();

  EXPECT_EQ(s.sectors, 16u);
  EXPECT_EQ(s.attempts, 7u);
  EXPECT_EQ(s.found, 5u);                 // lba 0..4
  EXPECT_EQ(s.verified, 4u);              // 0, 1, 3 (silently wrong, but reported good), 4
  EXPECT_EQ(s.silent_errors, 1u);
  ASSERT_EQ(s.silent_detail.size(), 1u);
  EXPECT_NE(s.silent_detail[0].find("lba 3"), std::string::npos);
  const uint64_t per = static_cast<uint64_t>(fmt.header_bits + fmt.data_bits);
  EXPECT_EQ(s.bits_compared, 6 * per);    // six attempts of the track
  EXPECT_EQ(s.bit_errors, 5u + 9u);
  EXPECT_EQ(s.bytes_compared, 5u * 512u);
  EXPECT_EQ(s.byte_errors, 7u + 1u);      // lba 2 and lba 3 (lba 4's final is right)
  EXPECT_DOUBLE_EQ(s.samples_per_second(), 2000.0);
  // Calibration over the six attempts: (confidence, right) = (1,1) (0.9,1) (0.3,0) (0.95,0) (0.2,0) (0.8,1).
  const double brier = (0.0 + 0.01 + 0.09 + 0.9025 + 0.04 + 0.04) / 6.0;
  EXPECT_NEAR(s.brier, brier, 1e-12);
  EXPECT_EQ(s.calibration_count, 6u);
  ASSERT_EQ(s.calibration.size(), 10u);
  EXPECT_EQ(s.calibration[9].count, 3u);  // 1.0, 0.95 and 0.9 (bins are [lo, hi), the last includes 1)
  EXPECT_NEAR(s.calibration[9].mean_confidence, 0.95, 1e-12);
  EXPECT_NEAR(s.calibration[9].share_correct, 2.0 / 3.0, 1e-12);
  EXPECT_EQ(s.calibration[8].count, 1u);  // 0.8, right
  EXPECT_NEAR(s.calibration[8].share_correct, 1.0, 1e-12);
  EXPECT_EQ(s.calibration[2].count, 1u);  // 0.2
  EXPECT_EQ(s.calibration[3].count, 1u);  // 0.3, wrong
  EXPECT_NEAR(s.calibration[3].share_correct, 0.0, 1e-12);
  EXPECT_EQ(s.calibration[0].count + s.calibration[1].count + s.calibration[4].count, 0u);
}

TEST(CompareScore, NothingFoundGivesNoRateRatherThanZero) {
  const auto fmt = subset_format();
  TruthImage truth(kSubset / "base" / "truth" / "image.bin", fmt);
  EntryScorer scorer("viterbi", "base", fmt, truth, {{0, 0}});
  scorer.add_capture({}, 10, 1.0);
  EntryScore s = scorer.finish();
  EXPECT_EQ(s.verified, 0u);
  EXPECT_DOUBLE_EQ(s.failure_rate(), 1.0);
  EXPECT_TRUE(std::isnan(s.bit_error_rate()));
  EXPECT_TRUE(std::isnan(s.byte_error_rate()));
}

TEST(CompareCorpus, ReadsTheCommittedSubset) {
  Corpus c = read_corpus(kSubset);
  EXPECT_EQ(c.name, "standard-subset");
  EXPECT_EQ(c.format, "tf1-512");
  ASSERT_EQ(c.entries.size(), 5u);
  EXPECT_EQ(c.entries[0].name, "base");
  EXPECT_TRUE(c.entries[0].in_sweep("snr"));
  EXPECT_TRUE(c.entries[0].in_sweep("density"));
  EXPECT_DOUBLE_EQ(c.entries[0].density, 2.3);
  // The subset's file and the folder name the same corpus.
  EXPECT_EQ(read_corpus(kSubset / "corpus.json").entries.size(), 5u);
}

TEST(CompareCorpus, CommittedSubsetIsSmall) {
  uintmax_t total = 0;
  for (const auto& e : fs::recursive_directory_iterator(kSubset))
    if (e.is_regular_file()) total += e.file_size();
  EXPECT_LT(total, 5u * 1024 * 1024) << "corpora/corpus/subset must stay under 5 MB";
}

TEST(CompareCorpus, MalformedDefinitionsAreRefusedByName) {
  const fs::path d = temp_dir("corpus");
  auto expect_input = [&](const std::string& text, const std::string& needle) {
    std::ofstream(d / "corpus.json") << text;
    try {
      read_corpus(d);
      ADD_FAILURE() << "accepted: " << text;
    } catch (const Error& e) {
      EXPECT_EQ(e.kind(), ErrorKind::input);
      EXPECT_NE(std::string(e.what()).find(needle), std::string::npos) << e.what();
    }
  };
  expect_input("{not json", "not valid JSON");
  expect_input(R"({"name": "x", "entries": []})", "salvor_corpus");
  expect_input(R"({"salvor_corpus": 2, "name": "x", "entries": []})", "version");
  expect_input(R"({"salvor_corpus": 1, "name": "x", "entries": []})", "non-empty");
  expect_input(R"({"salvor_corpus": 1, "name": "x", "entries": [{"name": "a", "density": 2, "snr_db": 20}]})",
               "was not built");
  fs::create_directories(d / "a");
  std::ofstream(d / "a" / "manifest.json") << "{}";
  expect_input(R"({"salvor_corpus": 1, "name": "x", "entries": [{"name": "a", "density": 2, "snr_db": 20},
               {"name": "a", "density": 2, "snr_db": 20}]})", "twice");
  expect_input(R"({"salvor_corpus": 1, "name": "x", "entries": [{"name": "a", "snr_db": 20}]})", "density");
  expect_input(R"({"salvor_corpus": 1, "name": "x", "entries": [{"name": "a", "folder": "../a", "density": 2, "snr_db": 20}]})",
               "plain folder");
  EXPECT_THROW(read_corpus(d / "nothing-here"), Error);
  fs::remove(d / "corpus.json");
  EXPECT_THROW(read_corpus(d), Error);  // a folder without corpus.json
}

TEST(ComparePlot, NiceTicks) {
  const std::vector<double> want = {0, 0.2, 0.4, 0.6, 0.8, 1};
  const auto got = nice_ticks(0, 1, 5);
  ASSERT_EQ(got.size(), want.size());
  for (size_t i = 0; i < want.size(); ++i) EXPECT_NEAR(got[i], want[i], 1e-12);
  auto t = nice_ticks(14, 30, 6);
  ASSERT_FALSE(t.empty());
  EXPECT_GE(t.front(), 14);
  EXPECT_LE(t.back(), 30);
  for (size_t i = 1; i < t.size(); ++i) EXPECT_NEAR(t[i] - t[i - 1], t[1] - t[0], 1e-9);
}

TEST(ComparePlot, DrawsEverySeriesWithLegendAndLogAxis) {
  PlotSpec p;
  p.title = "BER <test> & more";
  p.x_label = "SNR (dB)";
  p.y_label = "bit error rate";
  p.log_y = true;
  p.series = {{"viterbi", {{14, 0.2}, {20, 1e-3}, {26, 0.0}}}, {"npml", {{14, 0.1}, {20, 5e-4}, {26, 1e-5}}},
              {"empty", {{14, std::nan("")}}}};
  const std::string svg = line_plot_svg(p);
  EXPECT_EQ(svg.rfind("<svg", 0), 0u);
  EXPECT_NE(svg.find("</svg>"), std::string::npos);
  EXPECT_NE(svg.find("BER &lt;test&gt; &amp; more"), std::string::npos);  // escaped
  EXPECT_EQ(svg.find("<test>"), std::string::npos);
  auto count = [&](const std::string& s) {
    size_t n = 0;
    for (size_t i = svg.find(s); i != std::string::npos; i = svg.find(s, i + 1)) ++n;
    return n;
  };
  EXPECT_EQ(count("<polyline"), 2u);         // the empty series draws no line
  for (const char* label : {">viterbi<", ">npml<", ">empty<"}) EXPECT_EQ(count(label), 1u) << label;
  EXPECT_NE(svg.find(">1e-6<"), std::string::npos);  // decades down to below the smallest value
  EXPECT_NE(svg.find(">1<"), std::string::npos);
  EXPECT_NE(svg.find("hollow markers"), std::string::npos);  // the zero is explained
  EXPECT_NE(svg.find("#0072B2"), std::string::npos);          // Okabe–Ito blue first
}
