// core/plot: ticks, SVG plots, density grid, Welch periodogram, FIR response, eye traces.
// Oracles: scipy.signal.welch and scipy.signal.freqz from Debian's python3-scipy, run with
// SALVOR_ORACLE_PYTHON; XML well-formedness by Debian python3's xml.etree.

#include <gtest/gtest.h>

#include <sys/wait.h>
#include <unistd.h>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <numbers>
#include <random>
#include <sstream>
#include <string>
#include <vector>

#include "common/error.hpp"
#include "plot/eye.hpp"
#include "plot/spectra.hpp"
#include "plot/svg_plot.hpp"

namespace fs = std::filesystem;
using namespace salvor::plot;

namespace {

fs::path temp_dir(const std::string& name) {
  fs::path d = fs::temp_directory_path() / ("salvor-plot-" + name + "-" + std::to_string(::getpid()));
  fs::remove_all(d);
  fs::create_directories(d);
  return d;
}

std::string run_capture(const std::string& cmd, int& rc) {
  std::string out;
  FILE* p = popen(cmd.c_str(), "r");
  if (!p) { rc = -1; return out; }
  char buf[4096];
  size_t n;
  while ((n = fread(buf, 1, sizeof buf, p)) > 0) out.append(buf, n);
  int st = pclose(p);
  rc = WIFEXITED(st) ? WEXITSTATUS(st) : -1;
  return out;
}

std::vector<double> parse_numbers(const std::string& s) {
  std::istringstream in(s);
  std::vector<double> v;
  double x;
  while (in >> x) v.push_back(x);
  return v;
}

// Well-formed XML according to Debian python3's xml.etree (an independent parser).
bool xml_well_formed(const std::string& text, std::string& err) {
  fs::path d = temp_dir("xml");
  std::ofstream(d / "in.svg") << text;
  int rc = 0;
  err = run_capture(std::string(SALVOR_ORACLE_PYTHON) + " -c \"import sys, xml.etree.ElementTree as E; E.parse(sys.argv[1]); print('ok')\" " +
                        (d / "in.svg").string() + " 2>&1",
                    rc);
  fs::remove_all(d);
  return rc == 0 && err.find("ok") != std::string::npos;
}

size_t count_of(const std::string& s, const std::string& what) {
  size_t n = 0;
  for (size_t p = s.find(what); p != std::string::npos; p = s.find(what, p + 1)) ++n;
  return n;
}

}  // namespace

// Steps of 1, 2 or 5 x 10^k covering the range (Heckbert, "Nice numbers for graph labels",
// Graphics Gems, 1990).
TEST(NiceTicks, StepsAreOneTwoFiveAndCoverTheRange) {
  for (auto [lo, hi] : std::vector<std::pair<double, double>>{{0, 1}, {-3.7, 12.2}, {1e-4, 3e-4}, {-1e6, 2.5e6}, {0.5, 0.51}}) {
    auto t = nice_ticks(lo, hi, 6);
    ASSERT_GE(t.size(), 3u) << lo << " " << hi;
    ASSERT_LE(t.size(), 13u);
    double step = t[1] - t[0];
    double mant = step / std::pow(10.0, std::floor(std::log10(step) + 1e-9));
    EXPECT_TRUE(std::abs(mant - 1) < 1e-6 || std::abs(mant - 2) < 1e-6 || std::abs(mant - 5) < 1e-6) << step;
    for (size_t i = 1; i < t.size(); ++i) EXPECT_NEAR(t[i] - t[i - 1], step, 1e-9 * step);
    EXPECT_GE(t.front(), lo - 1e-9 * step);
    EXPECT_LE(t.back(), hi + 1e-9 * step);
    EXPECT_LT(t.front() - lo, step * (1 + 1e-9));  // no gap larger than a step at either end
    EXPECT_LT(hi - t.back(), step * (1 + 1e-9));
  }
  auto t = nice_ticks(0, 1, 5);
  ASSERT_EQ(t.size(), 6u);
  EXPECT_DOUBLE_EQ(t[0], 0.0);
  EXPECT_NEAR(t[5], 1.0, 1e-12);
}

TEST(LogTicks, DecadesAndFineTicksOnShortRanges) {
  auto t = log_ticks(1, 1e6);
  ASSERT_EQ(t.size(), 7u);
  for (size_t i = 0; i < t.size(); ++i) EXPECT_NEAR(t[i], std::pow(10.0, static_cast<double>(i)), 1e-9 * t[i]);
  auto f = log_ticks(1, 100);  // two decades: 1 2 5 10 20 50 100
  EXPECT_EQ(f.size(), 7u);
  EXPECT_TRUE(log_ticks(-1, 10).empty());
}

TEST(FormatNumber, ShortAndReadable) {
  EXPECT_EQ(format_number(0.25), "0.25");
  EXPECT_EQ(format_number(-3), "-3");
  EXPECT_EQ(format_number(1234.5678, 4), "1235");
  EXPECT_EQ(format_number(1e7, 3), "1e+07");
  EXPECT_EQ(format_number(std::nan("")), "n/a");
  EXPECT_EQ(xml_escape("a<b & \"c\" 'd'>"), "a&lt;b &amp; &quot;c&quot; &#39;d&#39;&gt;");
}

TEST(XYPlot, WellFormedEscapedAndLabelled) {
  XYPlot p({"plot-test", "title <with> & marks", 640, 240, {"x (units)"}, {"y"}});
  Series a{"line \"one\" & <two>", {0, 1, 2, 3}, {1, std::nan(""), 3, 2}};
  Series b{"stems", {0, 1, 2}, {-1, 0.5, 2}, "", SeriesStyle::stem};
  Series c{"dots", {0.5, 1.5}, {0, 1}, "", SeriesStyle::markers};
  p.add(a);
  p.add(b);
  p.add(c);
  p.add_vertical({1.5, "marker <x>"});
  p.add_horizontal({0.0, "zero"});
  p.add_band({0.2, 0.8, "band"});
  std::string s = p.svg();
  std::string err;
  EXPECT_TRUE(xml_well_formed(s, err)) << err;
  EXPECT_NE(s.find("id=\"plot-test\""), std::string::npos);
  EXPECT_NE(s.find("class=\"plot\""), std::string::npos);
  EXPECT_NE(s.find("line &quot;one&quot; &amp; &lt;two&gt;"), std::string::npos);
  EXPECT_EQ(s.find("<two>"), std::string::npos);
  EXPECT_EQ(count_of(s, "class=\"series\""), 3u);
  EXPECT_NE(s.find("class=\"legend\""), std::string::npos);
  EXPECT_NE(s.find("x (units)"), std::string::npos);
  // The NaN breaks the line into two pieces: two moves in the first series' path.
  size_t g = s.find("data-name=\"line");
  size_t d = s.find("d=\"", g);
  std::string path = s.substr(d, s.find('"', d + 3) - d);
  EXPECT_EQ(count_of(path, "M"), 2u) << path;
  EXPECT_EQ(s.find("nan"), std::string::npos);
}

TEST(XYPlot, LogAxisSpacesDecadesEvenly) {
  XYPlot p({"plot-log", "log", 640, 240, {"f", true}, {"g", true}});
  Series s{"s", {}, {}};
  for (int i = 0; i <= 4; ++i) { s.x.push_back(std::pow(10.0, i)); s.y.push_back(std::pow(10.0, i)); }
  s.x.push_back(-1);  // not drawable on a log axis: skipped
  s.y.push_back(5);
  p.add(s);
  std::string svg = p.svg();
  std::string err;
  EXPECT_TRUE(xml_well_formed(svg, err)) << err;
  size_t g = svg.find("data-name=\"s\"");
  size_t d = svg.find("d=\"", g) + 3;
  std::string path = svg.substr(d, svg.find('"', d) - d);
  // Points at 1, 10, ..., 1e4 on a log-log plot lie on a straight line with equal spacing.
  std::vector<double> xs, ys;
  for (char& c : path) if (c == 'M' || c == 'L') c = ' ';
  auto v = parse_numbers(path);
  ASSERT_EQ(v.size(), 10u) << path;
  for (size_t i = 0; i < 5; ++i) { xs.push_back(v[2 * i]); ys.push_back(v[2 * i + 1]); }
  for (size_t i = 2; i < 5; ++i) {
    EXPECT_NEAR(xs[i] - xs[i - 1], xs[1] - xs[0], 0.15);
    EXPECT_NEAR(ys[i] - ys[i - 1], ys[1] - ys[0], 0.15);
  }
  EXPECT_NE(svg.find(">1e4<"), std::string::npos);
}

TEST(XYPlot, BadInputRefused) {
  EXPECT_THROW(XYPlot({"", "t"}), salvor::Error);
  EXPECT_THROW(XYPlot({"has space", "t"}), salvor::Error);
  EXPECT_THROW(XYPlot({"ok", "t", 10, 10}), salvor::Error);
  XYPlot p({"ok", "t"});
  EXPECT_THROW(p.add({"s", {1, 2}, {1}}), salvor::Error);
}

TEST(DensityPlot, CountsPointsAndStaysSmall) {
  DensityConfig c;
  c.id = "plot-density";
  c.title = "d";
  c.x = {"x", false, 0.0, 1.0};
  c.y = {"y", false, 0.0, 1.0};
  c.columns = 10;
  c.rows = 10;
  DensityPlot d(c);
  d.add_point(0.05, 0.95);  // top-left cell
  d.add_point(0.05, 0.99);
  d.add_point(0.95, 0.05);  // bottom-right cell
  d.add_point(2.0, 0.5);    // outside
  EXPECT_EQ(d.count_at(0, 0), 2u);
  EXPECT_EQ(d.count_at(9, 9), 1u);
  EXPECT_EQ(d.points(), 4u);
  EXPECT_EQ(d.points_outside(), 1u);

  // A million points: the output is bounded by the grid, not by the count.
  c.columns = 200;
  c.rows = 120;
  DensityPlot big(c);
  std::mt19937 rng(5);
  std::normal_distribution<double> n(0.5, 0.15);
  for (int i = 0; i < 1000000; ++i) big.add_point(n(rng), n(rng));
  std::string s = big.svg();
  std::string err;
  EXPECT_TRUE(xml_well_formed(s, err)) << err;
  EXPECT_LT(s.size(), 1200000u);
  EXPECT_LE(count_of(s, "fill-opacity"), static_cast<size_t>(c.shade_levels));

  DensityConfig bad = c;
  bad.y.max.reset();
  EXPECT_THROW(DensityPlot{bad}, salvor::Error);
}

// scipy.signal.welch(x, fs, nperseg=N) with its defaults (Hann window, N/2 overlap,
// detrend='constant', scaling='density', one-sided) is the oracle.
TEST(Welch, AgreesWithScipyAndDoesNotDependOnChunking) {
  const size_t n = 20000, seg = 1024;
  const double fs = 250e6;
  std::vector<float> x(n);
  std::mt19937 rng(3);
  std::normal_distribution<double> noise(0, 0.1);
  for (size_t i = 0; i < n; ++i)
    x[i] = static_cast<float>(0.7 * std::sin(2 * std::numbers::pi * 25e6 / fs * static_cast<double>(i)) + 0.2 + noise(rng));
  fs::path d = temp_dir("welch");
  {
    std::ofstream f(d / "x.f32", std::ios::binary);
    f.write(reinterpret_cast<const char*>(x.data()), static_cast<std::streamsize>(x.size() * sizeof(float)));
  }
  int rc = 0;
  std::string out = run_capture(std::string(SALVOR_ORACLE_PYTHON) +
                                    " -c \"import sys, numpy as np, scipy.signal as s; x = np.fromfile(sys.argv[1], dtype=np.float32).astype(np.float64); "
                                    "f, p = s.welch(x, fs=" + std::to_string(fs) + ", nperseg=" + std::to_string(seg) +
                                    "); print(' '.join(repr(float(v)) for v in p))\" " + (d / "x.f32").string(),
                                rc);
  fs::remove_all(d);
  ASSERT_EQ(rc, 0) << out;
  std::vector<double> ref = parse_numbers(out);
  ASSERT_EQ(ref.size(), seg / 2 + 1);

  WelchEstimator w({seg, fs});
  w.process(x);
  Periodogram p = w.result();
  ASSERT_EQ(p.psd.size(), ref.size());
  EXPECT_EQ(p.segments, (n - seg) / (seg / 2) + 1);  // scipy drops the incomplete tail segment too
  double peak = *std::max_element(ref.begin(), ref.end());
  for (size_t k = 0; k < ref.size(); ++k) {
    // Single-precision FFT against double: relative to the bin, floored at 1e-6 of the peak.
    EXPECT_NEAR(p.psd[k], ref[k], 2e-4 * ref[k] + 1e-6 * peak) << "bin " << k;
  }
  EXPECT_NEAR(p.frequency_hz[seg / 2], fs / 2, 1e-6);
  size_t kmax = static_cast<size_t>(std::max_element(p.psd.begin(), p.psd.end()) - p.psd.begin());
  EXPECT_NEAR(p.frequency_hz[kmax], 25e6, fs / seg);

  for (size_t chunk : {size_t{1}, size_t{7}, size_t{4096}}) {
    WelchEstimator c({seg, fs});
    for (size_t i = 0; i < n; i += chunk) c.process(std::span<const float>(x).subspan(i, std::min(chunk, n - i)));
    Periodogram q = c.result();
    ASSERT_EQ(q.segments, p.segments);
    for (size_t k = 0; k < q.psd.size(); ++k) ASSERT_EQ(q.psd[k], p.psd[k]) << "chunk " << chunk << " bin " << k;
  }
  w.reset();
  EXPECT_TRUE(w.result().psd.empty());
  EXPECT_THROW(WelchEstimator({1000, fs}), salvor::Error);
  EXPECT_THROW(WelchEstimator({1024, 0}), salvor::Error);
}

// scipy.signal.freqz(h, worN=w) gives H(e^jw) of an FIR filter: the oracle for |H|.
TEST(FirResponse, AgreesWithScipyFreqz) {
  const std::vector<double> h = {0.05, -0.2, 1.0, 0.4, -0.1, 0.02};
  auto f = linspace(0.0, 0.5, 33);
  std::string hs, ws;
  for (double v : h) hs += (hs.empty() ? "" : ",") + std::to_string(v);
  for (double v : f) ws += (ws.empty() ? "" : ",") + std::to_string(v);
  int rc = 0;
  std::string out = run_capture(std::string(SALVOR_ORACLE_PYTHON) +
                                    " -c \"import numpy as np, scipy.signal as s; w, H = s.freqz([" + hs + "], worN=2*np.pi*np.array([" + ws +
                                    "])); print(' '.join(repr(float(v)) for v in np.abs(H)))\"",
                                rc);
  ASSERT_EQ(rc, 0) << out;
  auto ref = parse_numbers(out);
  auto m = fir_magnitude(h, f);
  ASSERT_EQ(ref.size(), m.size());
  for (size_t i = 0; i < m.size(); ++i) EXPECT_NEAR(m[i], ref[i], 1e-9) << i;
  auto db = fir_magnitude_db(std::vector<double>{1.0, 1.0}, std::vector<double>{0.0, 0.5}, -80);
  EXPECT_NEAR(db[0], 20 * std::log10(2.0), 1e-12);  // 1 + D: gain 2 at DC, a zero at Nyquist
  EXPECT_DOUBLE_EQ(db[1], -80);
}

// A windowed sinc reconstructs a band-limited sequence between its samples (sampling
// theorem, Shannon 1949): a sinusoid at 0.1 cycles/bit is recovered at half-bit offsets.
TEST(Eye, SincInterpolationReconstructsABandLimitedSignal) {
  std::vector<float> y(200);
  for (size_t i = 0; i < y.size(); ++i) y[i] = static_cast<float>(std::cos(2 * std::numbers::pi * 0.1 * static_cast<double>(i) + 0.3));
  for (double t = 40; t < 160; t += 0.37) {
    double truth = std::cos(2 * std::numbers::pi * 0.1 * t + 0.3);
    EXPECT_NEAR(sinc_interpolate(y, t, 12), truth, 5e-3) << t;  // tolerance: measured truncation error ~1e-3, with margin
  }
  EXPECT_FLOAT_EQ(static_cast<float>(sinc_interpolate(y, 77.0, 12)), y[77]);

  DensityConfig c;
  c.id = "plot-eye";
  c.title = "eye";
  c.x = {"t", false, -1.0, 1.0};
  c.y = {"y", false, -1.5, 1.5};
  c.columns = 40;
  c.rows = 30;
  DensityPlot eye(c);
  size_t traces = draw_eye(y, eye, {}, c.columns);
  EXPECT_EQ(traces, y.size() - 2 * 12);
  EXPECT_EQ(eye.points(), traces * c.columns);
  EXPECT_EQ(eye.points_outside(), 0u);
}
