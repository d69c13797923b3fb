// salvor report DIR: one self-contained HTML page about a decode folder: summary, damage
// map, SNR and confidence per track, and (re-decoding the one capture that holds the
// chosen sector) its eye diagram, the PLL trace, the equalizer and the capture spectrum.

#include <chrono>
#include <ctime>
#include <filesystem>
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
  std::error_code ec;
  auto ft = fs::last_write_time(p, ec);
  if (ec) return "(date not recorded)";
  auto sys = std::chrono::clock_cast<std::chrono::system_clock>(ft);
  std::time_t t = std::chrono::system_clock::to_time_t(sys);
  std::tm tm{};
  gmtime_r(&t, &tm);
  char buf[48];
  std::strftime(buf, sizeof buf, "%Y-%m-%d %H:%M UTC", &tm);
  return std::string(buf) + " (run.json written)";
}

// The default sector: the first unverified one that was found, else the first sector.
uint64_t default_sector(const results::DecodeFolder& f, std::string& why) {
  for (const auto& a : f.final_attempts())
    if (a.status == results::SectorStatus::failed || a.status == results::SectorStatus::conflict) {
      why = "the first unverified sector that was found";
      return a.lba;
    }
  why = "no sector was found but unverified, so the first sector";
  return 0;
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
      wave = probe_sector_capture(dir, run, folder.final_attempt(in.eye_lba), kSpectrumSamples);
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
