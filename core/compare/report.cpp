#include "compare/report.hpp"

#include <cmath>
#include <cstdio>
#include <iomanip>
#include <sstream>

#include "common/atomic_file.hpp"
#include "common/error.hpp"

namespace salvor::compare {

namespace fs = std::filesystem;

namespace {

std::string fixed(double v, int digits) {
  if (std::isnan(v)) return "n/a";
  char b[48];
  std::snprintf(b, sizeof b, "%.*f", digits, v);
  return b;
}

std::string sci(double v) {
  if (std::isnan(v)) return "n/a";
  if (v == 0) return "0";
  char b[48];
  std::snprintf(b, sizeof b, "%.2e", v);
  return b;
}

std::string sci_full(double v) {
  char b[48];
  std::snprintf(b, sizeof b, "%.6g", v);
  return b;
}

struct Column {
  std::string head;
  bool right;  // right-aligned (numbers)
};

const std::vector<Column>& columns() {
  static const std::vector<Column> c = {
      {"detector", false}, {"entry", false},     {"density", true},  {"snr_db", true},    {"jitter", true},
      {"damage", false},   {"sectors", true},    {"verified", true}, {"share", true},     {"ber_pre_ecc", true},
      {"byte_err_post", true}, {"silent", true}, {"brier", true},    {"samples_per_s", true}};
  return c;
}

std::vector<std::string> row(const CorpusEntry& e, const EntryScore& s) {
  return {s.detector,
          e.name,
          fixed(e.density, 2),
          fixed(e.snr_db, 1),
          fixed(e.jitter_bits, 3),
          e.damage,
          std::to_string(s.sectors),
          std::to_string(s.verified),
          fixed(s.verified_share(), 3),
          sci(s.bit_error_rate()),
          sci(s.byte_error_rate()),
          std::to_string(s.silent_errors),
          fixed(s.brier, 4),
          sci(s.samples_per_second())};
}

std::vector<std::vector<std::string>> rows(const Corpus& corpus, const CompareResult& r) {
  std::vector<std::vector<std::string>> out;
  const size_t ne = corpus.entries.size();
  for (size_t d = 0; d < r.detectors.size(); ++d)
    for (size_t e = 0; e < ne; ++e) out.push_back(row(corpus.entries[e], r.at(d, e, ne)));
  return out;
}

// Totals per detector over the whole corpus.
struct Totals {
  uint64_t sectors = 0, verified = 0, bits = 0, bit_errors = 0, bytes = 0, byte_errors = 0, silent = 0, cal = 0,
           samples = 0;
  double brier_sum = 0, seconds = 0;
};
Totals totals(const CompareResult& r, size_t d, size_t ne) {
  Totals t;
  for (size_t e = 0; e < ne; ++e) {
    const auto& s = r.at(d, e, ne);
    t.sectors += s.sectors;
    t.verified += s.verified;
    t.bits += s.bits_compared;
    t.bit_errors += s.bit_errors;
    t.bytes += s.bytes_compared;
    t.byte_errors += s.byte_errors;
    t.silent += s.silent_errors;
    t.cal += s.calibration_count;
    if (s.calibration_count) t.brier_sum += s.brier * static_cast<double>(s.calibration_count);
    t.samples += s.samples;
    t.seconds += s.decode_seconds;
  }
  return t;
}

}  // namespace

std::string report_table(const Corpus& corpus, const CompareResult& r) {
  const auto& cols = columns();
  auto body = rows(corpus, r);
  std::vector<size_t> w(cols.size());
  for (size_t i = 0; i < cols.size(); ++i) w[i] = cols[i].head.size();
  for (const auto& rw : body)
    for (size_t i = 0; i < rw.size(); ++i) w[i] = std::max(w[i], rw[i].size());
  std::ostringstream o;
  auto line = [&](const std::vector<std::string>& cells) {
    for (size_t i = 0; i < cells.size(); ++i) {
      if (i) o << "  ";
      o << (cols[i].right ? std::right : std::left) << std::setw(static_cast<int>(w[i])) << cells[i];
    }
    o << "\n";
  };
  std::vector<std::string> head;
  for (const auto& c : cols) head.push_back(c.head);
  line(head);
  std::string rule;
  for (size_t i = 0; i < cols.size(); ++i) rule += std::string(w[i], '-') + (i + 1 < cols.size() ? "  " : "");
  o << rule << "\n";
  for (const auto& rw : body) line(rw);
  return o.str();
}

std::string report_csv(const Corpus& corpus, const CompareResult& r) {
  std::ostringstream o;
  o << "detector,entry,density,snr_db,jitter_bits,jitter_share,damage,captures,sectors,verified,found,"
       "verified_share,failure_rate,bits_compared,bit_errors,bit_error_rate,bytes_compared,byte_errors,"
       "byte_error_rate,silent_errors,brier,calibration_count,samples,decode_seconds,samples_per_second\n";
  const size_t ne = corpus.entries.size();
  for (size_t d = 0; d < r.detectors.size(); ++d)
    for (size_t e = 0; e < ne; ++e) {
      const auto& en = corpus.entries[e];
      const auto& s = r.at(d, e, ne);
      auto rate = [](double v) { return std::isnan(v) ? std::string() : sci_full(v); };
      o << s.detector << "," << en.name << "," << en.density << "," << en.snr_db << "," << en.jitter_bits << ","
        << en.jitter_share << "," << en.damage << "," << s.captures << "," << s.sectors << "," << s.verified << ","
        << s.found << "," << std::setprecision(6) << s.verified_share() << "," << s.failure_rate() << ","
        << s.bits_compared << "," << s.bit_errors << "," << rate(s.bit_error_rate()) << "," << s.bytes_compared << ","
        << s.byte_errors << "," << rate(s.byte_error_rate()) << "," << s.silent_errors << "," << s.brier << ","
        << s.calibration_count << "," << s.samples << "," << s.decode_seconds << "," << s.samples_per_second() << "\n";
    }
  return o.str();
}

nlohmann::json report_json(const Corpus& corpus, const CompareResult& r, const nlohmann::json& provenance) {
  nlohmann::json entries = nlohmann::json::array();
  for (const auto& e : corpus.entries)
    entries.push_back({{"name", e.name},
                       {"description", e.description},
                       {"manifest", e.manifest.string()},
                       {"scenario", e.scenario},
                       {"seed", e.seed},
                       {"tracks", e.tracks},
                       {"sweeps", e.sweeps},
                       {"density", e.density},
                       {"snr_db", e.snr_db},
                       {"jitter_bits", e.jitter_bits},
                       {"jitter_share", e.jitter_share},
                       {"damage", e.damage}});
  nlohmann::json results = nlohmann::json::array();
  for (const auto& s : r.scores) results.push_back(s.to_json());
  nlohmann::json tot = nlohmann::json::array();
  const size_t ne = corpus.entries.size();
  for (size_t d = 0; d < r.detectors.size(); ++d) {
    Totals t = totals(r, d, ne);
    tot.push_back({{"detector", r.detectors[d]},
                   {"sectors", t.sectors},
                   {"verified", t.verified},
                   {"verified_share", t.sectors ? static_cast<double>(t.verified) / t.sectors : 0.0},
                   {"bit_errors", t.bit_errors},
                   {"bits_compared", t.bits},
                   {"bit_error_rate", t.bits ? static_cast<double>(t.bit_errors) / t.bits : std::nan("")},
                   {"byte_errors", t.byte_errors},
                   {"bytes_compared", t.bytes},
                   {"byte_error_rate", t.bytes ? static_cast<double>(t.byte_errors) / t.bytes : std::nan("")},
                   {"silent_errors", t.silent},
                   {"brier", t.cal ? t.brier_sum / static_cast<double>(t.cal) : std::nan("")},
                   {"samples_per_second", t.seconds > 0 ? t.samples / t.seconds : 0.0}});
  }
  return {{"salvor_compare", 1},
          {"corpus", {{"name", corpus.name}, {"description", corpus.description}, {"format", corpus.format},
                      {"definition", fs::absolute(corpus.definition).string()}}},
          {"detectors", r.detectors},
          {"entries", entries},
          {"results", results},
          {"totals", tot},
          {"silent_errors", r.silent_errors()},
          {"provenance", provenance}};
}

std::string report_markdown(const Corpus& corpus, const CompareResult& r, const nlohmann::json& provenance) {
  std::ostringstream o;
  const size_t ne = corpus.entries.size();
  o << "# Detector comparison on corpus `" << corpus.name << "`\n\n";
  if (!corpus.description.empty()) o << corpus.description << "\n\n";
  o << "Detectors: " << r.detectors.size() << ", corpus entries: " << ne << ", silent errors: **"
    << r.silent_errors() << "**" << (r.silent_errors() ? " (a sector reported verified holds wrong bytes)" : "")
    << ".\n\n";
  o << "## Totals per detector\n\n| detector | sectors | verified | share | BER before ECC | byte errors after ECC | "
       "silent | Brier | samples/s |\n|---|---:|---:|---:|---:|---:|---:|---:|---:|\n";
  for (size_t d = 0; d < r.detectors.size(); ++d) {
    Totals t = totals(r, d, ne);
    o << "| " << r.detectors[d] << " | " << t.sectors << " | " << t.verified << " | "
      << fixed(t.sectors ? static_cast<double>(t.verified) / t.sectors : 0.0, 3) << " | "
      << sci(t.bits ? static_cast<double>(t.bit_errors) / t.bits : std::nan("")) << " | "
      << sci(t.bytes ? static_cast<double>(t.byte_errors) / t.bytes : std::nan("")) << " | " << t.silent << " | "
      << fixed(t.cal ? t.brier_sum / static_cast<double>(t.cal) : std::nan(""), 4) << " | "
      << sci(t.seconds > 0 ? t.samples / t.seconds : 0.0) << " |\n";
  }
  o << "\n## Per entry\n\n|";
  for (const auto& c : columns()) o << " " << c.head << " |";
  o << "\n|";
  for (const auto& c : columns()) o << (c.right ? "---:|" : "---|");
  o << "\n";
  for (const auto& rw : rows(corpus, r)) {
    o << "|";
    for (const auto& cell : rw) o << " " << cell << " |";
    o << "\n";
  }
  o << "\nshare = verified sectors / sectors of the captured tracks; ber_pre_ecc = detected channel bits "
       "(header and data) against the encoder's bits of the true sector, every sector found; byte_err_post = user "
       "bytes of each found sector's final result against the truth; silent = attempts reported good or corrected "
       "whose bytes are wrong; brier = mean squared difference between the sector confidence and 1/0 for right/wrong "
       "bytes.\n";
  o << "\n## Confidence calibration\n\nPer detector over the whole corpus: attempts by confidence bin, the mean "
       "confidence in the bin (predicted) and the share whose bytes are right (observed).\n\n";
  for (size_t d = 0; d < r.detectors.size(); ++d) {
    std::vector<uint64_t> cnt(kCalibrationBins, 0);
    std::vector<double> conf(kCalibrationBins, 0), right(kCalibrationBins, 0);
    for (size_t e = 0; e < ne; ++e) {
      const auto& s = r.at(d, e, ne);
      for (size_t b = 0; b < s.calibration.size() && b < cnt.size(); ++b) {
        cnt[b] += s.calibration[b].count;
        conf[b] += s.calibration[b].mean_confidence * static_cast<double>(s.calibration[b].count);
        right[b] += s.calibration[b].share_correct * static_cast<double>(s.calibration[b].count);
      }
    }
    o << "### " << r.detectors[d] << "\n\n| confidence | attempts | predicted | observed |\n|---|---:|---:|---:|\n";
    for (int b = 0; b < kCalibrationBins; ++b) {
      const auto n = cnt[static_cast<size_t>(b)];
      o << "| " << fixed(static_cast<double>(b) / kCalibrationBins, 1) << "–"
        << fixed(static_cast<double>(b + 1) / kCalibrationBins, 1) << " | " << n << " | "
        << (n ? fixed(conf[static_cast<size_t>(b)] / static_cast<double>(n), 3) : std::string("–")) << " | "
        << (n ? fixed(right[static_cast<size_t>(b)] / static_cast<double>(n), 3) : std::string("–")) << " |\n";
    }
    o << "\n";
  }
  o << "## Plots\n\n";
  for (const auto& f : plot_file_names()) o << "![" << f << "](" << f << ")\n\n";
  o << "## Provenance\n\n```json\n" << provenance.dump(2) << "\n```\n";
  return o.str();
}

std::vector<std::string> plot_file_names() {
  return {"failure-vs-snr.svg", "ber-vs-snr.svg", "failure-vs-density.svg", "ber-vs-density.svg"};
}

PlotSpec sweep_plot(const Corpus& corpus, const CompareResult& r, const std::string& metric, const std::string& sweep) {
  PlotSpec p;
  p.log_y = true;
  const bool fail = metric == "failure_rate";
  p.y_label = fail ? "sector failure rate (not verified)" : "bit error rate before ECC";
  p.x_label = sweep == "snr" ? "SNR (dB)" : "channel density PW50 / T";
  p.title = std::string(fail ? "Sector failure rate" : "Bit error rate") + " against " +
            (sweep == "snr" ? "SNR" : "density") + " (" + corpus.name + ")";
  const size_t ne = corpus.entries.size();
  for (size_t d = 0; d < r.detectors.size(); ++d) {
    PlotSeries s;
    s.label = r.detectors[d];
    for (size_t e = 0; e < ne; ++e) {
      const auto& en = corpus.entries[e];
      if (!en.in_sweep(sweep)) continue;
      const auto& sc = r.at(d, e, ne);
      s.points.emplace_back(sweep == "snr" ? en.snr_db : en.density, fail ? sc.failure_rate() : sc.bit_error_rate());
    }
    p.series.push_back(std::move(s));
  }
  return p;
}

void write_report(const fs::path& dir, const Corpus& corpus, const CompareResult& r, const nlohmann::json& provenance) {
  std::error_code ec;
  fs::create_directories(dir, ec);
  if (ec) throw_output(dir.string(), "cannot create the output folder: " + ec.message());
  write_file_atomic(dir / "compare.csv", report_csv(corpus, r));
  write_file_atomic(dir / "compare.md", report_markdown(corpus, r, provenance));
  const auto names = plot_file_names();
  const std::pair<const char*, const char*> plots[] = {
      {"failure_rate", "snr"}, {"bit_error_rate", "snr"}, {"failure_rate", "density"}, {"bit_error_rate", "density"}};
  for (size_t i = 0; i < names.size(); ++i)
    write_file_atomic(dir / names[i], line_plot_svg(sweep_plot(corpus, r, plots[i].first, plots[i].second)));
  write_file_atomic(dir / "compare.json", report_json(corpus, r, provenance).dump(2) + "\n");  // last: complete
}

}  // namespace salvor::compare
