// salvor report DIR: one self-contained HTML page about a decode folder: summary, damage
// map, SNR and confidence per track, and (re-decoding the one capture that holds the
// chosen sector) its eye diagram, the PLL trace, the equalizer and the capture spectrum.

#include <sys/stat.h>

#include <chrono>
#include <ctime>
#include <filesystem>
#include <fstream>
#include <optional>
#include <iostream>

#include "cli_common.hpp"
#include "common/atomic_file.hpp"
#include "common/error.hpp"
#include "common/sha256.hpp"
#include "report_html.hpp"
#include "report_waveform.hpp"
#include "results/decode_folder.hpp"

namespace salvor::cli {

namespace fs = std::filesystem;

namespace {

// Capture samples kept for the spectrum: 2^20, enough for ~500 averaged segments.
constexpr size_t kSpectrumSamples = size_t{1} << 20;

std::string file_time_utc(const fs::path& p) {
  struct stat st {};
  if (::stat(p.c_str(), &st) != 0) return "(date not recorded)";
  std::time_t t = st.st_mtime;
  std::tm tm{};
  gmtime_r(&t, &tm);
  char buf[48];
  std::strftime(buf, sizeof buf, "%Y-%m-%d %H:%M UTC", &tm);
  return std::string(buf) + " (run.json written)";
}

// Streams sectors.jsonl (already validated by DecodeFolder::open) and calls `fn` for
// every attempt; memory does not grow with the log.
template <typename Fn>
void for_each_logged_attempt(const fs::path& dir, Fn fn) {
  std::ifstream log(dir / "sectors.jsonl");
  std::string line;
  while (std::getline(log, line))
    if (!line.empty()) fn(results::attempt_from_json(nlohmann::json::parse(line)));
}

// An attempt that read the sector's own header is one the decoder can show the eye of
// (a sector placed by position has no header to recognise it by).
bool eye_possible(const results::SectorAttempt& a) { return a.header_ok && !a.placed_by_position && !a.capture.empty(); }

// The default sector: the first unverified one that was found, preferring one that some
// attempt read the header of; else the first sector.
uint64_t default_sector(const results::DecodeFolder& f, std::string& why) {
  auto unverified_found = [](const results::SectorAttempt& a) {
    return a.status == results::SectorStatus::failed || a.status == results::SectorStatus::conflict;
  };
  std::vector<bool> header_read(f.final_attempts().size(), false);
  for_each_logged_attempt(f.dir(), [&](const results::SectorAttempt& a) {
    if (a.lba < header_read.size() && eye_possible(a)) header_read[a.lba] = true;
  });
  for (const auto& a : f.final_attempts())
    if (unverified_found(a) && header_read[a.lba]) {
      why = "the first unverified sector that was found with a readable header";
      return a.lba;
    }
  for (const auto& a : f.final_attempts())
    if (unverified_found(a)) {
      why = "the first unverified sector that was found";
      return a.lba;
    }
  why = "no sector was found but unverified, so the first sector";
  return 0;
}

// Which attempt to re-decode for the waveform plots: the final one if it read its header,
// else the first logged attempt that did (another revolution), else the final one.
results::SectorAttempt attempt_to_probe(const results::DecodeFolder& f, uint64_t lba, std::string& note) {
  const results::SectorAttempt& fin = f.final_attempt(lba);
  if (eye_possible(fin)) return fin;
  std::optional<results::SectorAttempt> other;
  for_each_logged_attempt(f.dir(), [&](const results::SectorAttempt& a) {
    if (!other && a.lba == lba && eye_possible(a)) other = a;
  });
  if (!other) return fin;
  note = "; the waveform plots use the attempt in " + fs::path(other->capture).filename().string() +
         " (its header was read; the final attempt's was not)";
  return *other;
}

}  // namespace

int run_report(const std::vector<std::string>& args) {
  return guarded("report", [&]() {
    std::string dir_arg, out;
    long long sector = -1;
    bool json = false, no_waveform = false;
    po::options_description o("report options");
    o.add_options()
        ("sector", po::value(&sector), "LBA of the sector for the eye diagram and PLL trace (default: first unverified found)")
        ("out,o", po::value(&out), "write the page here instead of DIR/report.html")
        ("no-waveform", po::bool_switch(&no_waveform), "do not re-decode the capture (no eye, PLL or spectrum plots)")
        ("json", po::bool_switch(&json), "print what was written as JSON");
    o.add_options()("dir", po::value(&dir_arg), "decode folder");
    po::positional_options_description pos;
    pos.add("dir", 1);
    po::variables_map vm;
    if (!parse_command_line("report", "DIR [--sector LBA] [--out FILE] [--json]", args, o, pos, vm)) return static_cast<int>(exit_ok);
    if (dir_arg.empty()) throw Error(ErrorKind::usage, "salvor report", "no decode folder given");

    const fs::path dir = dir_arg;
    results::DecodeFolder folder = results::DecodeFolder::open(dir);
    const nlohmann::json& run = folder.run_info();
    const uint64_t total = folder.geometry().total_sectors();
    if (vm.count("sector") && (sector < 0 || static_cast<uint64_t>(sector) >= total))
      throw Error(ErrorKind::usage, "--sector", std::to_string(sector) + " is outside the image (0.." + std::to_string(total - 1) + ")");

    ReportInput in;
    in.folder = &folder;
    in.run = &run;
    in.image_sha256 = sha256_file_hex(dir / "image.bin");
    in.run_date = run.contains("date") && run["date"].is_string() ? run["date"].get<std::string>() : file_time_utc(dir / "run.json");
    if (vm.count("sector")) {
      in.eye_lba = static_cast<uint64_t>(sector);
      in.eye_choice = "chosen with --sector";
    } else {
      in.eye_lba = default_sector(folder, in.eye_choice);
    }

    WaveformResult wave;
    if (no_waveform) {
      wave.why_not = "not asked for (--no-waveform)";
    } else {
      // A changed capture throws (exit 3); a missing one is said in the page.
      std::string which;
      results::SectorAttempt probe_attempt = attempt_to_probe(folder, in.eye_lba, which);
      in.eye_choice += which;
      wave = probe_sector_capture(dir, run, probe_attempt, kSpectrumSamples);
      wave.probed_position = probe_attempt.capture_position;
      if (!wave.available) std::cerr << "salvor report: no waveform plots: " << wave.why_not << "\n";
    }
    in.waveform = &wave;

    ReportSummary sum;
    const std::string html = render_report(in, sum);
    const fs::path target = out.empty() ? dir / "report.html" : fs::path(out);
    write_file_atomic(target, html);

    if (json) {
      nlohmann::json j = {{"report", target.string()}, {"bytes", html.size()}, {"sector", in.eye_lba},
                          {"waveform", wave.available}, {"sections", sum.sections}, {"plots", sum.plots}, {"notes", sum.notes}};
      if (wave.available) j["capture"] = wave.capture.path.string();
      std::cout << j.dump(2) << "\n";
    } else {
      std::cout << "report written to " << target.string() << " (" << html.size() / 1024 << " KiB, " << sum.plots.size() << " plots)\n";
      for (const auto& n : sum.notes) std::cout << "  missing " << n << "\n";
    }
    return static_cast<int>(exit_ok);
  });
}

}  // namespace salvor::cli
