// salvor report end to end: a tiny scenario is synthesized and decoded with the real
// commands, then reported. The page is checked with Debian python3's html.parser and
// xml.etree (independent parsers) and loaded in headless Chromium (Debian's chromium).

#include <gtest/gtest.h>
#include <sys/wait.h>
#include <unistd.h>

#include <cstdio>
#include <cstdlib>
#include <functional>
#include <map>
#include <filesystem>
#include <fstream>
#include <random>
#include <sstream>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "results/decode_folder.hpp"

namespace fs = std::filesystem;

namespace {

const std::string kBin = SALVOR_BIN_DIR;

struct Outcome {
  int rc = -1;
  std::string out;  // stdout and stderr
};

Outcome run(const std::string& cmd) {
  Outcome r;
  FILE* p = popen((cmd + " 2>&1").c_str(), "r");
  if (!p) return r;
  char buf[8192];
  size_t n;
  while ((n = fread(buf, 1, sizeof buf, p)) > 0) r.out.append(buf, n);
  int st = pclose(p);
  r.rc = WIFEXITED(st) ? WEXITSTATUS(st) : -1;
  return r;
}

std::string q(const fs::path& p) { return "'" + p.string() + "'"; }

std::string slurp(const fs::path& p) {
  std::ifstream in(p, std::ios::binary);
  std::ostringstream s;
  s << in.rdbuf();
  return s.str();
}

nlohmann::json read_json(const fs::path& p) { return nlohmann::json::parse(slurp(p)); }
void write_json(const fs::path& p, const nlohmann::json& j) { std::ofstream(p) << j.dump(2); }

// Checks the page with Debian python3: html.parser (balanced tags, ids, classes) and a strict
// XML parse of the whole page (written as XHTML), plus any reference to outside resources.
constexpr const char* kChecker = R"py(
import sys, re, json, html.parser, xml.etree.ElementTree as ET
text = open(sys.argv[1], encoding='utf-8').read()
class P(html.parser.HTMLParser):
    VOID = {'meta', 'br', 'hr', 'img', 'link', 'input'}
    def __init__(s):
        super().__init__(); s.stack = []; s.errors = []; s.ids = []; s.classes = set(); s.tags = set()
    def _attrs(s, tag, attrs):
        d = dict(attrs); s.tags.add(tag)
        if d.get('id'): s.ids.append(d['id'])
        for c in (d.get('class') or '').split(): s.classes.add(c)
    def handle_starttag(s, tag, attrs):
        s._attrs(tag, attrs)
        if tag not in s.VOID: s.stack.append(tag)
    def handle_startendtag(s, tag, attrs):
        s._attrs(tag, attrs)
    def handle_endtag(s, tag):
        if not s.stack or s.stack[-1] != tag: s.errors.append('unexpected </%s> after %s' % (tag, s.stack[-3:]))
        else: s.stack.pop()
p = P(); p.feed(text); p.close()
if p.stack: p.errors.append('unclosed: %s' % p.stack)
xml_ok, xml_err, svg_ids = True, '', []
try:
    root = ET.fromstring(re.sub(r'^<!DOCTYPE html>\s*', '', text))
    svg_ids = [e.get('id') for e in root.iter('{http://www.w3.org/2000/svg}svg') if e.get('id')]
except ET.ParseError as e:
    xml_ok, xml_err = False, str(e)
external = re.findall(r'(?:src|href)\s*=\s*"(?!#)[^"]*"', text) + re.findall(r'url\((?!#)[^)]*\)', text) + re.findall(r'<script|@import|<link', text)
print(json.dumps({'errors': p.errors, 'ids': p.ids, 'classes': sorted(p.classes), 'tags': sorted(p.tags), 'xml_ok': xml_ok,
                  'xml_err': xml_err, 'svg_ids': svg_ids, 'external': external,
                  'duplicate_ids': sorted({i for i in p.ids if p.ids.count(i) > 1})}))
)py";

nlohmann::json check_page(const fs::path& html, const fs::path& scratch) {
  fs::path script = scratch / "check_page.py";
  if (!fs::exists(script)) std::ofstream(script) << kChecker;
  Outcome r = run(std::string(SALVOR_ORACLE_PYTHON) + " " + q(script) + " " + q(html));
  EXPECT_EQ(r.rc, 0) << r.out;
  return nlohmann::json::parse(r.out);
}

bool contains(const nlohmann::json& arr, const std::string& v) {
  for (const auto& x : arr)
    if (x == v) return true;
  return false;
}

const std::vector<std::string> kSections = {"summary", "damage-map", "tracks", "eye", "pll", "equalizer", "spectrum", "unverified", "provenance"};
const std::vector<std::string> kPlots = {"plot-track-snr", "plot-track-confidence", "plot-eye", "plot-pll-rate",
                                         "plot-pll-phase", "plot-eq-taps", "plot-eq-response", "plot-spectrum"};

// One synthesized and decoded tiny scenario for the whole suite.
class ReportTest : public ::testing::Test {
 protected:
  static fs::path root, captures, decoded;
  static std::string setup_error;

  static void SetUpTestSuite() {
    root = fs::temp_directory_path() / ("salvor-report-test-" + std::to_string(::getpid()));
    fs::remove_all(root);
    fs::create_directories(root);
    captures = root / "cap";
    decoded = root / "out";
    Outcome s = run(kBin + "/salvor-synth --scenario tiny --out " + q(captures));
    if (s.rc != 0) { setup_error = "salvor-synth failed: " + s.out; return; }
    Outcome d = run(kBin + "/salvor decode " + q(captures) + " --out " + q(decoded) + " --quiet --threads 2");
    if (d.rc != 0 && d.rc != 4) setup_error = "salvor decode failed (" + std::to_string(d.rc) + "): " + d.out;
  }
  static void TearDownTestSuite() { fs::remove_all(root); }

  void SetUp() override { ASSERT_TRUE(setup_error.empty()) << setup_error; }

  // A copy of the decode folder whose run.json points at copies of the captures in `where`,
  // made by `edit` (which may change or delete them).
  static fs::path relocated_copy(const std::string& name, const std::function<void(const fs::path&)>& edit) {
    fs::path dir = root / name, moved = root / (name + "-captures");
    fs::create_directories(moved);
    fs::copy(decoded, dir, fs::copy_options::recursive);
    fs::remove(dir / "report.html");  // a page another test wrote into the original folder
    nlohmann::json j = read_json(dir / "run.json");
    std::map<std::string, std::string> renamed;
    for (auto& in : j["inputs"]) {
      std::string role = in["role"];
      if (role != "capture" && role != "sidecar") continue;
      fs::path from = in["path"].get<std::string>(), to = moved / from.filename();
      fs::copy_file(from, to, fs::copy_options::overwrite_existing);
      renamed[from.string()] = to.string();
      in["path"] = to.string();
      if (role == "capture") edit(to);
    }
    for (auto& c : j["captures"])
      if (renamed.count(c["path"].get<std::string>())) c["path"] = renamed[c["path"].get<std::string>()];
    write_json(dir / "run.json", j);
    return dir;
  }
};
fs::path ReportTest::root, ReportTest::captures, ReportTest::decoded;
std::string ReportTest::setup_error;

TEST_F(ReportTest, PageIsWrittenWellFormedSelfContainedWithEverySectionAndPlot) {
  Outcome r = run(kBin + "/salvor report " + q(decoded) + " --json");
  ASSERT_EQ(r.rc, 0) << r.out;
  nlohmann::json out = nlohmann::json::parse(r.out.substr(r.out.find('{')));
  EXPECT_TRUE(out["waveform"].get<bool>()) << r.out;
  fs::path page = decoded / "report.html";
  ASSERT_TRUE(fs::exists(page));
  EXPECT_EQ(out["report"], page.string());
  nlohmann::json c = check_page(page, root);
  EXPECT_TRUE(c["errors"].empty()) << c["errors"].dump();
  EXPECT_TRUE(c["xml_ok"].get<bool>()) << c["xml_err"];
  EXPECT_TRUE(c["external"].empty()) << c["external"].dump();
  EXPECT_TRUE(c["duplicate_ids"].empty()) << c["duplicate_ids"].dump();
  EXPECT_FALSE(contains(c["tags"], "script"));
  for (const auto& s : kSections) EXPECT_TRUE(contains(c["ids"], s)) << "section " << s;
  for (const auto& p : kPlots) EXPECT_TRUE(contains(c["svg_ids"], p)) << "plot " << p;
  EXPECT_TRUE(contains(c["ids"], "damage-map-figure"));
  EXPECT_TRUE(contains(c["classes"], "density"));  // the eye is drawn as a density grid
  std::string html = slurp(page);
  // The summary names the image's SHA-256 as run.json records it.
  nlohmann::json run_json = read_json(decoded / "run.json");
  EXPECT_NE(html.find(run_json["outputs"]["image.bin"]["sha256"].get<std::string>()), std::string::npos);
  // The preamble line sits at a quarter of the bit rate (coding-and-formats reference, §2T preamble).
  EXPECT_NE(html.find("preamble: bit rate / 4"), std::string::npos);
  // --out writes elsewhere and leaves the folder's page alone.
  fs::path other = root / "elsewhere.html";
  Outcome r2 = run(kBin + "/salvor report " + q(decoded) + " --out " + q(other) + " --no-waveform");
  ASSERT_EQ(r2.rc, 0) << r2.out;
  EXPECT_TRUE(fs::exists(other));
  EXPECT_NE(slurp(other).find("--no-waveform"), std::string::npos);
}

TEST_F(ReportTest, ChromiumLoadsThePageWithoutErrorsAndRendersThePlots) {
  const fs::path chromium = "/usr/bin/chromium";
  if (!fs::exists(chromium)) GTEST_SKIP() << "/usr/bin/chromium is absent (Debian package chromium; tools/setup installs it)";
  fs::path page = root / "chromium.html";
  Outcome r = run(kBin + "/salvor report " + q(decoded) + " --out " + q(page));
  ASSERT_EQ(r.rc, 0) << r.out;
  fs::path profile = root / "chromium-profile";
  fs::create_directories(profile);
  const std::string flags =
      " --headless --no-sandbox --disable-gpu --disable-quic --no-first-run --disable-background-networking"
      " --disable-component-update --disable-sync --enable-logging=stderr --v=0 --user-data-dir=" + q(profile);
  fs::path dom = root / "dom.html", log = root / "chromium.log";
  int rc = std::system(("timeout 90 " + chromium.string() + flags + " --dump-dom 'file://" + page.string() + "' > " + q(dom) + " 2> " + q(log)).c_str());
  ASSERT_TRUE(WIFEXITED(rc) && WEXITSTATUS(rc) == 0) << slurp(log);
  std::string d = slurp(dom), l = slurp(log);
  ASSERT_NE(d.find("</body>"), std::string::npos) << "no DOM dumped: " << l;
  for (const auto& p : kPlots) EXPECT_NE(d.find("id=\"" + p + "\""), std::string::npos) << "plot " << p << " not in the DOM";
  for (const auto& s : kSections) EXPECT_NE(d.find("id=\"" + s + "\""), std::string::npos) << "section " << s;
  // Console errors and blocked loads would show in Chromium's log as CONSOLE or "Refused to".
  EXPECT_EQ(l.find("Refused to"), std::string::npos) << l;
  EXPECT_EQ(l.find(":CONSOLE"), std::string::npos) << l;
  EXPECT_EQ(l.find("Uncaught"), std::string::npos) << l;
  // And a picture: a PNG (signature \x89PNG) of a real size.
  fs::path png = root / "report.png";
  rc = std::system(("timeout 90 " + chromium.string() + flags + " --hide-scrollbars --window-size=1200,2400 --screenshot=" + q(png) +
                    " 'file://" + page.string() + "' > /dev/null 2>> " + q(log)).c_str());
  ASSERT_TRUE(WIFEXITED(rc) && WEXITSTATUS(rc) == 0) << slurp(log);
  std::string img = slurp(png);
  ASSERT_GT(img.size(), 20000u);
  EXPECT_EQ(img.substr(0, 4), "\x89PNG");
}

TEST_F(ReportTest, ChangedCaptureIsRefusedWithExitThree) {
  // Control: an unchanged copy of the capture is accepted.
  fs::path same = relocated_copy("same", [](const fs::path&) {});
  Outcome ok = run(kBin + "/salvor report " + q(same) + " --json");
  ASSERT_EQ(ok.rc, 0) << ok.out;
  EXPECT_NE(ok.out.find("\"waveform\": true"), std::string::npos) << ok.out;
  // One byte changed after the decode: the SHA-256 no longer matches run.json.
  fs::path changed = relocated_copy("changed", [](const fs::path& p) {
    std::fstream f(p, std::ios::in | std::ios::out | std::ios::binary);
    f.seekg(static_cast<std::streamoff>(fs::file_size(p) / 2));
    char c = 0;
    f.read(&c, 1);
    c = static_cast<char>(c ^ 0x40);
    f.seekp(static_cast<std::streamoff>(fs::file_size(p) / 2));
    f.write(&c, 1);
  });
  Outcome r = run(kBin + "/salvor report " + q(changed));
  EXPECT_EQ(r.rc, 3) << r.out;  // DEVELOPERS.md: 3 = an input is invalid
  EXPECT_NE(r.out.find("changed since the decode"), std::string::npos) << r.out;
  EXPECT_FALSE(fs::exists(changed / "report.html"));
}

TEST_F(ReportTest, MissingCaptureStillGivesAReportThatSaysWhy) {
  fs::path gone = relocated_copy("gone", [](const fs::path& p) { fs::remove(p); });
  Outcome r = run(kBin + "/salvor report " + q(gone) + " --json");
  ASSERT_EQ(r.rc, 0) << r.out;
  nlohmann::json out = nlohmann::json::parse(r.out.substr(r.out.find('{')));
  EXPECT_FALSE(out["waveform"].get<bool>());
  nlohmann::json c = check_page(gone / "report.html", root);
  EXPECT_TRUE(c["xml_ok"].get<bool>()) << c["xml_err"];
  EXPECT_FALSE(contains(c["svg_ids"], "plot-eye"));
  EXPECT_FALSE(contains(c["svg_ids"], "plot-spectrum"));
  EXPECT_TRUE(contains(c["svg_ids"], "plot-track-snr"));
  EXPECT_TRUE(contains(c["svg_ids"], "plot-eq-taps"));  // from run.json's capture summary
  EXPECT_NE(slurp(gone / "report.html").find("is no longer there"), std::string::npos);
  // A sector never found, on a track no capture covers (the tiny scenario decodes one track).
  Outcome n = run(kBin + "/salvor report " + q(decoded) + " --sector 500 --out " + q(root / "never.html") + " --json");
  ASSERT_EQ(n.rc, 0) << n.out;
  EXPECT_NE(n.out.find("\"waveform\": false"), std::string::npos) << n.out;
  EXPECT_NE(slurp(root / "never.html").find("sector 500 was never found"), std::string::npos);
}

TEST_F(ReportTest, BadCommandLinesAndFolders) {
  EXPECT_EQ(run(kBin + "/salvor report").rc, 2);
  EXPECT_EQ(run(kBin + "/salvor report " + q(decoded) + " --sector 99999999").rc, 2);
  EXPECT_EQ(run(kBin + "/salvor report " + q(decoded) + " --bogus").rc, 2);
  Outcome r = run(kBin + "/salvor report " + q(root / "no-such-folder"));
  EXPECT_EQ(r.rc, 3) << r.out;
  EXPECT_NE(r.out.find("no-such-folder"), std::string::npos) << r.out;
}

// Thousands of sectors (a synthetic folder written with DecodeFolder): the page stays
// small because tracks are aggregated and the list of unverified sectors is capped.
TEST(ReportLarge, ThousandsOfSectorsGiveAPageOfReasonableSize) {
  fs::path dir = fs::temp_directory_path() / ("salvor-report-large-" + std::to_string(::getpid()));
  fs::remove_all(dir);
  salvor::results::Geometry g{2, 1500, 4, 512};  // 12000 sectors, 3000 tracks
  salvor::results::DecodeFolder f(dir, g);
  std::mt19937 rng(7);
  std::uniform_real_distribution<double> u(0, 1);
  uint64_t unverified = 0;
  for (uint64_t lba = 0; lba < g.total_sectors(); ++lba) {
    salvor::results::SectorAttempt a;
    a.lba = lba;
    a.sector = static_cast<int>(lba % g.sectors_per_track);
    a.head = static_cast<int>((lba / g.sectors_per_track) % g.heads);
    a.cylinder = static_cast<int>(lba / (static_cast<uint64_t>(g.sectors_per_track) * g.heads));
    double p = u(rng);
    a.status = p < 0.03 ? salvor::results::SectorStatus::missing
               : p < 0.08 ? salvor::results::SectorStatus::failed
               : p < 0.3  ? salvor::results::SectorStatus::corrected
                          : salvor::results::SectorStatus::good;
    unverified += !salvor::results::is_verified(a.status);
    if (a.status != salvor::results::SectorStatus::missing) {
      a.data.assign(static_cast<size_t>(g.sector_bytes), static_cast<uint8_t>(lba));
      a.snr_db = 14 + 4 * u(rng) - 0.004 * a.cylinder;
      a.confidence = a.status == salvor::results::SectorStatus::failed ? 0.4 * u(rng) : 0.5 + 0.5 * u(rng);
      a.crc = a.status == salvor::results::SectorStatus::failed ? "fail" : "pass";
      a.rs_corrected = {1, a.status == salvor::results::SectorStatus::failed ? -1 : 0};
      a.rs_erasures = {0, 0};
      a.capture = "/nonexistent/c" + std::to_string(a.cylinder) + ".flac";
      a.notes = {"invented evidence <with markup> & more"};
    }
    f.record(std::move(a));
  }
  f.run_info() = {{"salvor_run", 1}, {"command", "decode"}, {"salvor_version", "test"}, {"format", {{"name", "tf1-512"}}},
                  {"settings", {{"detector", "viterbi"}}}, {"inputs", nlohmann::json::array()}, {"captures", nlohmann::json::array()}};
  f.write({});
  Outcome r = run(kBin + "/salvor report " + q(dir) + " --json");
  ASSERT_EQ(r.rc, 0) << r.out;
  fs::path page = dir / "report.html";
  const auto size = fs::file_size(page);
  EXPECT_LT(size, 5u * 1024 * 1024) << "report of " << g.total_sectors() << " sectors is " << size << " bytes";
  nlohmann::json c = check_page(page, dir);
  EXPECT_TRUE(c["xml_ok"].get<bool>()) << c["xml_err"];
  EXPECT_TRUE(c["errors"].empty()) << c["errors"].dump();
  EXPECT_TRUE(contains(c["ids"], "unverified-more"));
  std::string html = slurp(page);
  EXPECT_NE(html.find("and " + std::to_string(unverified - 500) + " more unverified sectors"), std::string::npos);
  EXPECT_NE(html.find("Each point groups 5 consecutive tracks (3000 in all)"), std::string::npos);  // 3000 tracks into <= 720 points
  EXPECT_EQ(html.find("<with markup>"), std::string::npos);                           // evidence text is escaped
  fs::remove_all(dir);
}

}  // namespace
