// The HTML page of `salvor report`: see report_html.hpp. Plots come from core/plot; the
// damage map is the same picture as damage-map.svg.

#include "report_html.hpp"

#include <algorithm>
#include <chrono>
#include <cmath>
#include <ctime>
#include <map>
#include <numeric>
#include <sstream>

#include "common/version.hpp"
#include "plot/eye.hpp"
#include "plot/spectra.hpp"
#include "plot/svg_plot.hpp"
#include "results/damage_map.hpp"

namespace salvor::cli {

namespace {

using plot::format_number;
using plot::xml_escape;
using results::SectorAttempt;
using results::SectorStatus;

constexpr const char* kStyle = R"css(
body { font-family: "DejaVu Sans", "Liberation Sans", Arial, sans-serif; color: #222; background: #f6f6f4; margin: 0; }
main { max-width: 1080px; margin: 0 auto; padding: 8px 28px 40px; background: #fff; }
header { border-bottom: 3px solid #0072b2; padding: 14px 0 10px; }
h1 { font-size: 22px; margin: 0 0 4px; }
h2 { font-size: 17px; margin: 30px 0 8px; padding-bottom: 4px; border-bottom: 1px solid #ddd; }
p { line-height: 1.45; margin: 6px 0; }
.sub { color: #666; font-size: 13px; }
.note { background: #fff7e0; border-left: 4px solid #e69f00; padding: 6px 10px; font-size: 14px; }
table { border-collapse: collapse; font-size: 13px; }
table.kv td { padding: 3px 14px 3px 0; vertical-align: top; }
table.kv td:first-child { color: #555; white-space: nowrap; }
table.data { width: 100%; }
table.data th { text-align: left; background: #eef2f6; padding: 4px 6px; border-bottom: 1px solid #ccd; }
table.data td { padding: 3px 6px; border-bottom: 1px solid #eee; vertical-align: top; }
table.data tr:nth-child(even) td { background: #fafafa; }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums; }
code, .mono { font-family: "DejaVu Sans Mono", "Liberation Mono", monospace; font-size: 12px; word-break: break-all; }
.badge { display: inline-block; padding: 0 6px; border-radius: 3px; color: #fff; font-size: 12px; }
.bar { display: flex; height: 18px; border: 1px solid #bbb; margin: 8px 0 4px; max-width: 720px; }
.bar span { display: block; height: 100%; }
.counts { display: flex; flex-wrap: wrap; gap: 6px 22px; font-size: 13px; margin-bottom: 8px; }
.swatch { display: inline-block; width: 11px; height: 11px; border: 1px solid #555; margin-right: 5px; vertical-align: -1px; }
figure { margin: 10px 0 18px; }
figure svg { max-width: 100%; height: auto; display: block; }
figcaption { font-size: 12.5px; color: #555; margin-top: 3px; max-width: 900px; }
.pair { display: flex; flex-wrap: wrap; gap: 12px; }
.pair figure { flex: 1 1 500px; margin: 6px 0; }
.scroll { overflow-x: auto; }
)css";

plot::Axis axis(std::string label) {
  plot::Axis a;
  a.label = std::move(label);
  return a;
}
plot::Axis axis(std::string label, double lo, double hi) {
  plot::Axis a = axis(std::move(label));
  a.min = lo;
  a.max = hi;
  return a;
}

std::string status_badge(SectorStatus s) {
  std::string colour = results::status_colour(s);
  // Dark text on the light colours so every badge stays readable.
  bool light = s == SectorStatus::corrected || s == SectorStatus::failed || s == SectorStatus::conflict;
  return "<span class=\"badge\" style=\"background:" + colour + (light ? ";color:#111" : "") + "\">" + results::to_string(s) + "</span>";
}

double median(std::vector<double> v) {
  if (v.empty()) return std::nan("");
  size_t m = v.size() / 2;
  std::nth_element(v.begin(), v.begin() + static_cast<long>(m), v.end());
  double hi = v[m];
  if (v.size() % 2) return hi;
  double lo = *std::max_element(v.begin(), v.begin() + static_cast<long>(m));
  return 0.5 * (lo + hi);
}

std::string join_ints(const std::vector<int>& v) {
  if (v.empty()) return "–";
  std::string s;
  for (size_t i = 0; i < v.size(); ++i) s += (i ? " / " : "") + std::to_string(v[i]);
  return s;
}

std::string figure(const std::string& svg, const std::string& caption) {
  return "<figure>" + svg + "<figcaption>" + caption + "</figcaption></figure>\n";
}

std::string note(const std::string& text) { return "<p class=\"note\">" + xml_escape(text) + "</p>\n"; }

const nlohmann::json* chosen_capture_summary(const nlohmann::json& run, const WaveformResult* w, const SectorAttempt& s) {
  auto caps = run.find("captures");
  if (caps == run.end() || !caps->is_array() || caps->empty()) return nullptr;
  std::string want = w ? w->capture.path.string() : s.capture;
  for (const auto& c : *caps)
    if (c.is_object() && !want.empty() &&
        (c.value("path", "") == want || std::filesystem::path(c.value("path", "")).filename() == std::filesystem::path(want).filename()))
      return &c;
  for (const auto& c : *caps)
    if (c.is_object() && c.value("cylinder", -1) == s.cylinder && c.value("head", -1) == s.head) return &c;
  return nullptr;
}

std::vector<double> json_doubles(const nlohmann::json& j, const char* key) {
  std::vector<double> v;
  auto it = j.find(key);
  if (it == j.end() || !it->is_array()) return v;
  for (const auto& x : *it)
    if (x.is_number()) v.push_back(x.get<double>());
  return v;
}

// ---- sections ----------------------------------------------------------------------

void summary_section(std::ostringstream& o, const ReportInput& in) {
  const auto& f = *in.folder;
  const auto& run = *in.run;
  const auto& all = f.final_attempts();
  results::StatusCounts c = results::count_statuses(all);
  const uint64_t sb = static_cast<uint64_t>(f.geometry().sector_bytes);
  const auto& g = f.geometry();
  o << "<section id=\"summary\"><h2>Summary</h2>\n";
  const std::pair<SectorStatus, uint64_t> rows[] = {{SectorStatus::good, c.good},
                                                    {SectorStatus::corrected, c.corrected},
                                                    {SectorStatus::failed, c.failed},
                                                    {SectorStatus::missing, c.missing},
                                                    {SectorStatus::conflict, c.conflict}};
  o << "<div class=\"bar\" id=\"status-bar\">";
  for (const auto& [st, n] : rows)
    if (n)
      o << "<span style=\"width:" << format_number(100.0 * static_cast<double>(n) / static_cast<double>(c.total()), 4)
        << "%;background:" << results::status_colour(st) << "\" title=\"" << results::to_string(st) << " " << n << "\"></span>";
  o << "</div>\n<div class=\"counts\" id=\"status-counts\">";
  for (const auto& [st, n] : rows)
    o << "<span data-status=\"" << results::to_string(st) << "\"><span class=\"swatch\" style=\"background:" << results::status_colour(st)
      << "\"></span>" << results::to_string(st) << " <b>" << n << "</b> ("
      << format_number(c.total() ? 100.0 * static_cast<double>(n) / static_cast<double>(c.total()) : 0.0, 3) << " %)</span>";
  o << "</div>\n";
  const nlohmann::json settings = run.value("settings", nlohmann::json::object());
  std::string detector = settings.value("detector", std::string("(not recorded)"));
  std::string target = settings.value("target", std::string());
  const nlohmann::json fmt = run.value("format", nlohmann::json::object());
  auto row = [&](const std::string& k, const std::string& v_html) { o << "<tr><td>" << xml_escape(k) << "</td><td>" << v_html << "</td></tr>\n"; };
  o << "<table class=\"kv\" id=\"summary-table\">\n";
  row("sectors", std::to_string(c.total()) + " (" + std::to_string(g.heads) + " heads × " + std::to_string(g.cylinders) + " cylinders × " +
                     std::to_string(g.sectors_per_track) + " sectors of " + std::to_string(g.sector_bytes) + " bytes)");
  row("verified", std::to_string(c.verified()) + " (" + format_number(c.total() ? 100.0 * static_cast<double>(c.verified()) / static_cast<double>(c.total()) : 0.0, 4) + " %)");
  row("bytes recovered", std::to_string(c.verified() * sb) + " of " + std::to_string(c.total() * sb) + " (verified sectors only)");
  row("image SHA-256", "<span class=\"mono\">" + xml_escape(in.image_sha256) + "</span>");
  row("format", xml_escape(fmt.value("name", std::string("(not recorded)"))));
  row("detector", xml_escape(detector) + (target.empty() ? "" : " (target " + xml_escape(target) + ")"));
  row("salvor version of the run", xml_escape(run.value("salvor_version", std::string("(not recorded)"))));
  row("run", xml_escape(run.value("command", std::string("decode"))) + ", " + xml_escape(in.run_date));
  row("folder", "<span class=\"mono\">" + xml_escape(f.dir().string()) + "</span>");
  o << "</table>\n</section>\n";
}

void damage_section(std::ostringstream& o, const ReportInput& in) {
  o << "<section id=\"damage-map\"><h2>Damage map</h2>\n<div class=\"scroll\" id=\"damage-map-figure\">"
    << results::damage_map_svg(in.folder->geometry(), in.folder->final_attempts(), "final status of every sector")
    << "</div>\n<p class=\"sub\">One panel per head: cylinders down, sectors across, colour by final status (also in damage-map.svg).</p></section>\n";
}

void tracks_section(std::ostringstream& o, const ReportInput& in, ReportSummary& sum) {
  const auto& g = in.folder->geometry();
  const size_t tracks = static_cast<size_t>(std::max(1, g.heads)) * static_cast<size_t>(std::max(1, g.cylinders));
  const size_t per_point = std::max<size_t>(1, (tracks + in.track_points - 1) / in.track_points);
  const size_t points = (tracks + per_point - 1) / per_point;
  std::vector<std::vector<double>> snr(points);
  std::vector<double> cmin(points, std::nan("")), csum(points, 0);
  std::vector<size_t> n(points, 0);
  for (const auto& a : in.folder->final_attempts()) {
    if (a.cylinder < 0 || a.head < 0 || a.head >= g.heads || a.cylinder >= g.cylinders) continue;
    size_t t = static_cast<size_t>(a.cylinder) * static_cast<size_t>(g.heads) + static_cast<size_t>(a.head);
    size_t p = t / per_point;
    if (a.status != SectorStatus::missing && std::isfinite(a.snr_db)) snr[p].push_back(a.snr_db);
    cmin[p] = std::isnan(cmin[p]) ? a.confidence : std::min(cmin[p], a.confidence);
    csum[p] += a.confidence;
    ++n[p];
  }
  plot::Series s_snr{"median SNR", {}, {}, plot::palette_colour(0)};
  plot::Series s_min{"minimum confidence", {}, {}, plot::palette_colour(1)};
  plot::Series s_mean{"mean confidence", {}, {}, plot::palette_colour(0)};
  for (size_t p = 0; p < points; ++p) {
    double x = static_cast<double>(p * per_point) + 0.5 * static_cast<double>(per_point - 1);
    s_snr.x.push_back(x);
    s_snr.y.push_back(median(snr[p]));
    s_min.x.push_back(x);
    s_min.y.push_back(n[p] ? cmin[p] : std::nan(""));
    s_mean.x.push_back(x);
    s_mean.y.push_back(n[p] ? csum[p] / static_cast<double>(n[p]) : std::nan(""));
  }
  const bool few = points <= 60;
  const std::string xlabel = g.heads > 1 ? "track (cylinder × " + std::to_string(g.heads) + " + head)" : "track (cylinder)";
  // The x range covers every track, so tracks without data show as gaps, not as a zoom.
  const plot::Axis xaxis = axis(xlabel, -0.5, static_cast<double>(tracks) - 0.5);
  plot::XYPlot ps({"plot-track-snr", "SNR per track", 980, 260, xaxis, axis("median SNR (dB)")});
  if (few) { auto m = s_snr; m.name = ""; m.style = plot::SeriesStyle::markers; ps.add(s_snr); ps.add(m); } else ps.add(s_snr);
  plot::XYPlot pc({"plot-track-confidence", "confidence per track", 980, 260, xaxis, axis("confidence", 0.0, 1.02)});
  pc.add_horizontal({0.5, "verified above 0.5", "#777777", true});
  if (few) {
    auto a = s_mean; a.name = ""; a.style = plot::SeriesStyle::markers;
    auto b = s_min; b.name = ""; b.style = plot::SeriesStyle::markers;
    pc.add(s_mean); pc.add(s_min); pc.add(a); pc.add(b);
  } else {
    pc.add(s_mean); pc.add(s_min);
  }
  std::string agg = per_point > 1 ? " Each point groups " + std::to_string(per_point) + " consecutive tracks (" + std::to_string(tracks) + " in all)." : "";
  o << "<section id=\"tracks\"><h2>SNR and confidence per track</h2>\n"
    << figure(ps.svg(), "Median over the sectors found on the track of the SNR the decoder estimated for each sector." + agg)
    << figure(pc.svg(), "Lowest and mean final confidence of the track's sectors (missing sectors count as 0). Verified sectors score above 0.5." + agg)
    << "</section>\n";
  sum.plots.push_back("plot-track-snr");
  sum.plots.push_back("plot-track-confidence");
}

void eye_section(std::ostringstream& o, const ReportInput& in, ReportSummary& sum) {
  o << "<section id=\"eye\"><h2>Eye diagram of sector " << in.eye_lba << "</h2>\n";
  const WaveformResult* w = in.waveform;
  const auto& sec = in.folder->final_attempt(in.eye_lba);
  o << "<p class=\"sub\">Sector " << in.eye_lba << " (cylinder " << sec.cylinder << ", head " << sec.head << ", sector " << sec.sector << ", "
    << results::to_string(sec.status) << ") — " << xml_escape(in.eye_choice) << ".</p>\n";
  if (!w || !w->available) {
    std::string why = w ? w->why_not : "the capture was not probed";
    o << note("No eye diagram: " + why + ".");
    sum.notes.push_back("eye: " + why);
  } else if (w->probe.eye_samples.size() < 64) {
    std::string why = w->capture.same_sector ? "the re-decode of the capture did not read this sector's header, and the decoder keeps the equalized samples only of a sector whose header verified"
                                             : "no capture listed in run.json holds this sector; the plots below show a capture of its track";
    o << note("No eye diagram: " + why + ".");
    sum.notes.push_back("eye: " + why);
  } else {
    const auto& y = w->probe.eye_samples;
    const auto& ideal = w->probe.eye_ideal;
    std::map<long, size_t> levels;  // ideal values on a 1e-3 grid
    for (float v : ideal) ++levels[std::lround(v * 1000.0)];
    std::vector<float> sorted(y.begin(), y.end());
    std::sort(sorted.begin(), sorted.end());
    double lo = sorted[sorted.size() / 400], hi = sorted[sorted.size() - 1 - sorted.size() / 400];
    if (!levels.empty()) { lo = std::min(lo, levels.begin()->first / 1000.0); hi = std::max(hi, levels.rbegin()->first / 1000.0); }
    double pad = 0.12 * (hi - lo + 1e-9);
    plot::DensityConfig dc;
    dc.id = "plot-eye";
    dc.title = "equalized samples over two bit periods";
    dc.width = 980;
    dc.height = 380;
    dc.x = axis("time from the bit instant (bit periods)", -1.0, 1.0);
    dc.y = axis("equalized sample", lo - pad, hi + pad);
    dc.columns = 240;
    dc.rows = 140;
    plot::DensityPlot eye(dc);
    size_t traces = plot::draw_eye(y, eye, {}, dc.columns);
    const bool draw_levels = levels.size() <= 12;
    if (draw_levels)
      for (const auto& [v, cnt] : levels) eye.add_horizontal({v / 1000.0, "target " + format_number(v / 1000.0, 3), "#d55e00", true});
    eye.add_vertical({0.0, "", "#999999", true});
    double err = 0;
    size_t m = std::min(y.size(), ideal.size());
    for (size_t i = 0; i < m; ++i) err += (y[i] - ideal[i]) * (y[i] - ideal[i]);
    double rms = m ? std::sqrt(err / static_cast<double>(m)) : 0;
    std::string cap = std::to_string(traces) + " traces of the sector's " + std::to_string(y.size()) +
                      " bit-spaced samples (header to end of data), interpolated between bit instants with a windowed sinc; "
                      "shade = square root of the count. Dashed lines: the target levels (" + std::to_string(levels.size()) + " distinct, the target " +
                      xml_escape(w->target_name.empty() ? std::string("of the detector") : w->target_name) +
                      " applied to the decided bits)" + (draw_levels ? "" : " — too many to draw") + ". RMS deviation of the samples at the bit instants from their ideal level: " +
                      format_number(rms, 3) + ".";
    o << figure(eye.svg(), cap);
    sum.plots.push_back("plot-eye");
  }
  o << "</section>\n";
}

void pll_section(std::ostringstream& o, const ReportInput& in, ReportSummary& sum) {
  const WaveformResult* w = in.waveform;
  o << "<section id=\"pll\"><h2>Timing recovery (PLL)</h2>\n";
  if (!w || !w->available || w->probe.pll_trace.empty()) {
    std::string why = !w ? "the capture was not probed" : !w->available ? w->why_not : "the decoder kept no PLL trace";
    o << note("No PLL trace: " + why + ".") << "</section>\n";
    sum.notes.push_back("pll: " + why);
    return;
  }
  const auto& tr = w->probe.pll_trace;
  const auto& sec = in.folder->final_attempt(in.eye_lba);
  // Group into at most 1500 points: mean rate offset, largest phase error (spikes matter).
  const size_t group = std::max<size_t>(1, (tr.size() + 1499) / 1500);
  plot::Series rate{"rate offset", {}, {}, plot::palette_colour(0)};
  plot::Series phase{"phase error (rms)", {}, {}, plot::palette_colour(1)};
  for (size_t i = 0; i < tr.size(); i += group) {
    size_t e = std::min(tr.size(), i + group);
    double r = 0, p = 0;
    for (size_t k = i; k < e; ++k) { r += tr[k].rate_offset; p = std::max(p, tr[k].phase_error_rms); }
    double x = static_cast<double>(tr[i].bit);
    rate.x.push_back(x);
    rate.y.push_back(1e6 * r / static_cast<double>(e - i));
    phase.x.push_back(x);
    phase.y.push_back(p);
  }
  plot::XYPlot pr({"plot-pll-rate", "bit-rate offset the loop tracked", 980, 240, axis("channel bit"), axis("rate offset (ppm)")});
  plot::XYPlot pp({"plot-pll-phase", "timing error detector output", 980, 240, axis("channel bit"), axis("phase error rms (bit periods)")});
  pr.add(rate);
  pp.add(phase);
  std::string where;
  const double sync_pos = w->probed_position >= 0 ? w->probed_position : sec.capture_position;
  if (w->capture.same_sector && sync_pos >= 0) {
    // The bit at the sector's sync mark, from the trace's position-to-bit mapping.
    auto it = std::lower_bound(tr.begin(), tr.end(), sync_pos,
                               [](const timing::TimingTracePoint& p, double pos) { return p.position < pos; });
    if (it != tr.end()) {
      double b0 = static_cast<double>(it->bit);
      if (it != tr.begin()) {
        auto prev = std::prev(it);
        double f = (sync_pos - prev->position) / std::max(1e-9, it->position - prev->position);
        b0 = static_cast<double>(prev->bit) + f * static_cast<double>(it->bit - prev->bit);
      }
      double len = std::max<double>(static_cast<double>(w->probe.eye_samples.size()), 0.002 * static_cast<double>(tr.back().bit));
      pr.add_band({b0, b0 + len, "sector " + std::to_string(in.eye_lba)});
      pp.add_band({b0, b0 + len, "sector " + std::to_string(in.eye_lba)});
      where = " The shaded band is sector " + std::to_string(in.eye_lba) + " (from its sync mark at capture sample " +
              std::to_string(std::llround(sync_pos)) + ").";
    }
  }
  uint64_t lock = 0;
  for (const auto& p : tr) lock += p.state == timing::TimingState::track;
  std::string cap = "Capture " + xml_escape(w->capture.path.filename().string()) + ": " + std::to_string(tr.size()) +
                    " trace points (" + format_number(100.0 * static_cast<double>(lock) / static_cast<double>(tr.size()), 3) +
                    " % in tracking)" + (group > 1 ? ", " + std::to_string(group) + " per plotted point" : "") + "." + where;
  o << figure(pr.svg(), "Relative offset of the recovered bit clock from the nominal bit rate, in parts per million. " + cap)
    << figure(pp.svg(), "RMS output of the timing error detector between trace points (largest of each plotted group). " + cap);
  o << "</section>\n";
  sum.plots.push_back("plot-pll-rate");
  sum.plots.push_back("plot-pll-phase");
}

void equalizer_section(std::ostringstream& o, const ReportInput& in, ReportSummary& sum) {
  const WaveformResult* w = in.waveform;
  const auto& sec = in.folder->final_attempt(in.eye_lba);
  std::vector<double> taps, target;
  std::string source, target_name;
  if (w && w->available && !w->probe.equalizer_taps.empty()) {
    taps = w->probe.equalizer_taps;
    target = w->probe.target;
    target_name = w->target_name;
    source = "the fine equalizer after training on sector " + std::to_string(in.eye_lba) + " (re-decoded)";
  } else if (const auto* cs = chosen_capture_summary(*in.run, w, sec)) {
    taps = json_doubles(*cs, "equalizer_taps");
    target = json_doubles(*cs, "target");
    target_name = cs->value("target_name", std::string());
    source = "the fine equalizer at the end of capture " + xml_escape(std::filesystem::path(cs->value("path", "")).filename().string()) +
             " (from run.json)";
  }
  o << "<section id=\"equalizer\"><h2>Equalizer and target</h2>\n";
  if (taps.empty()) {
    o << note("No equalizer taps: neither the re-decode nor run.json holds any.") << "</section>\n";
    sum.notes.push_back("equalizer: no taps");
    return;
  }
  plot::Series st{"taps", {}, taps, plot::palette_colour(0), plot::SeriesStyle::stem};
  for (size_t i = 0; i < taps.size(); ++i) st.x.push_back(static_cast<double>(i));
  plot::XYPlot pt({"plot-eq-taps", "equalizer taps", 480, 260, axis("tap (bit periods)"), axis("weight"), false});
  pt.add(st);
  auto f = plot::linspace(0.0, 0.5, 257);
  plot::XYPlot pf({"plot-eq-response", "magnitude responses", 480, 260, axis("frequency (cycles per bit)", 0.0, 0.5), axis("|H| (dB)")});
  pf.add({"equalizer W", f, plot::fir_magnitude_db(taps, f, -60), plot::palette_colour(0)});
  if (!target.empty())
    pf.add({"target " + (target_name.empty() ? std::string("T") : target_name), f, plot::fir_magnitude_db(target, f, -60), plot::palette_colour(1), plot::SeriesStyle::line, 1.6, true});
  std::string tt;
  for (size_t i = 0; i < target.size(); ++i) tt += (i ? ", " : "") + format_number(target[i], 4);
  o << "<div class=\"pair\">" << figure(pt.svg(), "The " + std::to_string(taps.size()) + " taps of " + source + ".")
    << figure(pf.svg(), "|W(e<sup>jω</sup>)| computed from the taps, and the target's response (target taps: " + xml_escape(tt.empty() ? "none" : tt) +
                            "); floor −60 dB.")
    << "</div></section>\n";
  sum.plots.push_back("plot-eq-taps");
  sum.plots.push_back("plot-eq-response");
}

void spectrum_section(std::ostringstream& o, const ReportInput& in, ReportSummary& sum) {
  const WaveformResult* w = in.waveform;
  o << "<section id=\"spectrum\"><h2>Spectrum of the capture</h2>\n";
  if (!w || !w->available || w->probe.raw_samples.size() < 64 || !(w->probe.sample_rate_hz > 0)) {
    std::string why = !w ? "the capture was not probed" : !w->available ? w->why_not : "too few raw samples were kept";
    o << note("No spectrum: " + why + ".") << "</section>\n";
    sum.notes.push_back("spectrum: " + why);
    return;
  }
  const auto& raw = w->probe.raw_samples;
  size_t seg = 4096;
  while (seg > 16 && seg * 2 > raw.size()) seg /= 2;
  plot::WelchEstimator welch({seg, w->probe.sample_rate_hz});
  welch.process(raw);
  plot::Periodogram pg = welch.result();
  plot::Series s{"power spectral density", {}, {}, plot::palette_colour(0), plot::SeriesStyle::line, 1.3};
  double peak = -1e300;
  for (size_t k = 1; k < pg.psd.size(); ++k) peak = std::max(peak, 10 * std::log10(std::max(pg.psd[k], 1e-300)));
  for (size_t k = 1; k < pg.psd.size(); ++k) {  // DC is removed per segment: start at bin 1
    s.x.push_back(pg.frequency_hz[k] / 1e6);
    s.y.push_back(std::max(peak - 90, 10 * std::log10(std::max(pg.psd[k], 1e-300))));
  }
  plot::XYPlot p({"plot-spectrum", "averaged periodogram", 980, 300, axis("frequency (MHz)", 0.0, w->probe.sample_rate_hz / 2e6),
                  axis("PSD (dB re full scale² / Hz)"), false});
  p.add(s);
  // The preamble's line: a 2T preamble (the usual one) is a tone at a quarter of the bit
  // rate; the period comes from the format's own pattern when it has one.
  const int pre = w->preamble_period_bits ? w->preamble_period_bits : 4;
  if (w->probe.bit_rate_hz > 0) {
    double fp = w->probe.bit_rate_hz / pre;
    p.add_vertical({fp / 1e6, "preamble: bit rate / " + std::to_string(pre) + " = " + format_number(fp / 1e6, 4) + " MHz", "#d55e00", true});
    if (w->gap_period_bits && w->gap_period_bits != pre)
      p.add_vertical({w->probe.bit_rate_hz / w->gap_period_bits / 1e6, "gap: bit rate / " + std::to_string(w->gap_period_bits), "#009e73", true});
    if (w->probe.bit_rate_hz / 2 < w->probe.sample_rate_hz / 2)
      p.add_vertical({w->probe.bit_rate_hz / 2e6, "bit rate / 2", "#777777", true});
  }
  o << figure(p.svg(), "Welch's averaged periodogram (Hann window, " + std::to_string(seg) + "-point segments, 50 % overlap, " +
                           std::to_string(pg.segments) + " segments) of the first " + std::to_string(raw.size()) + " samples of " +
                           xml_escape(w->capture.path.filename().string()) + " at " + format_number(w->probe.sample_rate_hz / 1e6, 5) +
                           " MS/s. Dashed lines: the spectral lines of the format's preamble and gap patterns at the bit rate (" +
                           format_number(w->probe.bit_rate_hz / 1e6, 5) + " Mbit/s) divided by the period of their written levels; the curve is floored 90 dB below its peak.")
    << "</section>\n";
  sum.plots.push_back("plot-spectrum");
}

void unverified_section(std::ostringstream& o, const ReportInput& in) {
  const auto& all = in.folder->final_attempts();
  size_t total = 0;
  for (const auto& a : all) total += !results::is_verified(a.status);
  o << "<section id=\"unverified\"><h2>Unverified sectors (" << total << ")</h2>\n";
  if (total == 0) {
    o << "<p>Every sector verified (CRC-32 passed).</p></section>\n";
    return;
  }
  o << "<div class=\"scroll\"><table class=\"data\" id=\"unverified-table\"><thead><tr><th class=\"num\">LBA</th><th>C/H/S</th><th>status</th>"
       "<th class=\"num\">confidence</th><th>CRC</th><th>RS corrected</th><th>RS erasures</th><th class=\"num\">SNR (dB)</th>"
       "<th class=\"num\">min |LLR|</th><th>notes</th></tr></thead><tbody>\n";
  size_t shown = 0;
  for (const auto& a : all) {
    if (results::is_verified(a.status)) continue;
    if (shown == in.unverified_rows) break;
    ++shown;
    std::string notes;
    for (size_t i = 0; i < a.notes.size(); ++i) notes += (i ? "; " : "") + a.notes[i];
    const bool found = a.status != SectorStatus::missing;
    o << "<tr data-lba=\"" << a.lba << "\"><td class=\"num\">" << a.lba << "</td><td>" << a.cylinder << "/" << a.head << "/" << a.sector
      << "</td><td>" << status_badge(a.status) << "</td><td class=\"num\">" << format_number(a.confidence, 3) << "</td><td>"
      << xml_escape(a.crc) << "</td><td>" << join_ints(a.rs_corrected) << "</td><td>" << join_ints(a.rs_erasures) << "</td><td class=\"num\">"
      << (found ? format_number(a.snr_db, 3) : "–") << "</td><td class=\"num\">" << (found ? format_number(a.reliability_min, 3) : "–")
      << "</td><td>" << xml_escape(notes) << "</td></tr>\n";
  }
  o << "</tbody></table></div>\n";
  if (shown < total)
    o << "<p class=\"more\" id=\"unverified-more\">… and " << (total - shown) << " more unverified sectors (the first " << shown
      << " are listed; every attempt is in sectors.jsonl).</p>\n";
  o << "<p class=\"sub\">RS columns: symbols corrected and erasures used per interleave (−1: the decoder failed on that interleave).</p></section>\n";
}

void provenance_section(std::ostringstream& o, const ReportInput& in) {
  const auto& run = *in.run;
  o << "<section id=\"provenance\"><h2>Provenance</h2>\n";
  auto inputs = run.find("inputs");
  size_t n = inputs != run.end() && inputs->is_array() ? inputs->size() : 0;
  o << "<p class=\"sub\">" << n << " inputs recorded in run.json";
  if (auto p = run.find("plugins"); p != run.end() && p->is_array()) {
    o << "; detectors loaded: ";
    size_t i = 0;
    for (const auto& d : *p) o << (i++ ? ", " : "") << xml_escape(d.value("name", "?") + " " + d.value("version", ""));
  }
  o << ".</p>\n";
  if (n) {
    o << "<div class=\"scroll\"><table class=\"data\" id=\"inputs-table\"><thead><tr><th>role</th><th>file</th><th>SHA-256</th></tr></thead><tbody>\n";
    size_t shown = 0;
    for (const auto& i : *inputs) {
      if (++shown > 40) break;
      o << "<tr><td>" << xml_escape(i.value("role", "")) << "</td><td class=\"mono\">" << xml_escape(i.value("path", ""))
        << "</td><td class=\"mono\">" << xml_escape(i.value("sha256", "")) << "</td></tr>\n";
    }
    o << "</tbody></table></div>\n";
    if (n > 40) o << "<p class=\"sub\">… and " << n - 40 << " more in run.json.</p>\n";
  }
  o << "</section>\n";
}

std::string now_utc() {
  std::time_t t = std::chrono::system_clock::to_time_t(std::chrono::system_clock::now());
  std::tm tm{};
  gmtime_r(&t, &tm);
  char buf[32];
  std::strftime(buf, sizeof buf, "%Y-%m-%d %H:%M UTC", &tm);
  return buf;
}

}  // namespace

std::string render_report(const ReportInput& in, ReportSummary& sum) {
  std::ostringstream o;
  o << "<!DOCTYPE html>\n<html xmlns=\"http://www.w3.org/1999/xhtml\" lang=\"en\">\n<head>\n<meta charset=\"utf-8\"/>\n"
       "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\"/>\n"
       "<meta http-equiv=\"Content-Security-Policy\" content=\"default-src 'none'; style-src 'unsafe-inline'; img-src data:\"/>\n"
    << "<title>salvor report: " << xml_escape(in.folder->dir().filename().string()) << "</title>\n<style>" << kStyle << "</style>\n</head>\n<body>\n<main>\n";
  o << "<header><h1>Decode report: " << xml_escape(in.folder->dir().filename().string()) << "</h1>\n<p class=\"sub\">Written by salvor "
    << xml_escape(version_string()) << " on " << now_utc() << " from <span class=\"mono\">" << xml_escape(in.folder->dir().string())
    << "</span>.</p></header>\n";
  summary_section(o, in);
  damage_section(o, in);
  tracks_section(o, in, sum);
  eye_section(o, in, sum);
  pll_section(o, in, sum);
  equalizer_section(o, in, sum);
  spectrum_section(o, in, sum);
  unverified_section(o, in);
  provenance_section(o, in);
  o << "</main>\n</body>\n</html>\n";
  sum.sections = {"summary", "damage-map", "tracks", "eye", "pll", "equalizer", "spectrum", "unverified", "provenance"};
  return o.str();
}

}  // namespace salvor::cli
