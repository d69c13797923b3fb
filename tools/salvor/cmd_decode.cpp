// salvor decode INPUTS --out DIR: captures (or a manifest) to a recovered image, the
// confidence log, the damage map and provenance.

#include <algorithm>
#include <chrono>
#include <filesystem>
#include <iomanip>
#include <iostream>
#include <map>
#include <sstream>
#include <thread>

#include "cli_common.hpp"
#include "common/error.hpp"
#include "common/version.hpp"
#include "detect/plugin_host.hpp"
#include "pipeline/decode_job.hpp"
#include "pipeline/job.hpp"
#include "results/decode_folder.hpp"

namespace salvor::cli {

namespace fs = std::filesystem;

namespace {

detect::ParamSettings parse_params(const std::vector<std::string>& items) {
  detect::ParamSettings out;
  for (const auto& it : items) {
    auto eq = it.find('=');
    if (eq == std::string::npos || eq == 0)
      throw Error(ErrorKind::usage, "--param", "'" + it + "' is not KEY=VALUE");
    out.emplace_back(it.substr(0, eq), it.substr(eq + 1));
  }
  return out;
}

struct TrackCount {
  int cylinder, head;
  uint64_t unverified = 0, total = 0;
};

std::vector<TrackCount> worst_tracks(const std::vector<results::SectorAttempt>& all, size_t n) {
  std::map<std::pair<int, int>, TrackCount> m;
  for (const auto& a : all) {
    auto& t = m[{a.cylinder, a.head}];
    t.cylinder = a.cylinder;
    t.head = a.head;
    ++t.total;
    if (!results::is_verified(a.status)) ++t.unverified;
  }
  std::vector<TrackCount> v;
  for (auto& [k, t] : m)
    if (t.unverified) v.push_back(t);
  std::stable_sort(v.begin(), v.end(), [](const TrackCount& a, const TrackCount& b) { return a.unverified > b.unverified; });
  if (v.size() > n) v.resize(n);
  return v;
}

}  // namespace

// Shared by decode and retry: prints the summary of a folder, returns the exit code.
int print_folder_summary(const results::DecodeFolder& folder, const std::string& image_sha, bool as_json,
                         const nlohmann::json& extra) {
  const auto& all = folder.final_attempts();
  results::StatusCounts c = results::count_statuses(all);
  const uint64_t sector_bytes = static_cast<uint64_t>(folder.geometry().sector_bytes);
  auto worst = worst_tracks(all, 5);
  if (as_json) {
    nlohmann::json j = extra;
    j["out"] = folder.dir().string();
    j["sectors_total"] = c.total();
    j["good"] = c.good;
    j["corrected"] = c.corrected;
    j["failed"] = c.failed;
    j["missing"] = c.missing;
    j["conflict"] = c.conflict;
    j["bytes_recovered"] = c.verified() * sector_bytes;
    j["image_sha256"] = image_sha;
    nlohmann::json wt = nlohmann::json::array();
    for (const auto& t : worst)
      wt.push_back({{"cylinder", t.cylinder}, {"head", t.head}, {"unverified", t.unverified}, {"sectors", t.total}});
    j["worst_tracks"] = wt;
    std::cout << j.dump(2) << "\n";
  } else {
    auto row = [](const std::string& k, const std::string& v) {
      std::cout << "  " << std::left << std::setw(18) << k << v << "\n";
    };
    auto pct = [&](uint64_t n) {
      std::ostringstream o;
      o << n << std::string(n < 10 ? 5 : n < 100 ? 4 : n < 1000 ? 3 : n < 10000 ? 2 : 1, ' ') << "("
        << std::fixed << std::setprecision(1) << (c.total() ? 100.0 * n / c.total() : 0.0) << " %)";
      return o.str();
    };
    std::cout << "sectors\n";
    row("good", pct(c.good));
    row("corrected", pct(c.corrected));
    row("failed", pct(c.failed));
    row("missing", pct(c.missing));
    if (c.conflict) row("conflict", pct(c.conflict));
    row("total", std::to_string(c.total()));
    row("bytes recovered", std::to_string(c.verified() * sector_bytes) + " of " + std::to_string(c.total() * sector_bytes));
    if (!worst.empty()) {
      std::cout << "worst tracks (cylinder/head: unverified of sectors)\n";
      std::string line;
      for (const auto& t : worst)
        line += "  " + std::to_string(t.cylinder) + "/" + std::to_string(t.head) + ": " + std::to_string(t.unverified) +
                " of " + std::to_string(t.total);
      std::cout << line << "\n";
    }
    std::cout << "written to " << folder.dir().string() << "\n";
    row("image", (folder.dir() / "image.bin").string() + "  sha256 " + image_sha.substr(0, 16) + "...");
    row("confidence log", (folder.dir() / "sectors.jsonl").string());
    row("damage map", (folder.dir() / "damage-map.svg").string() + " (and .json)");
    row("provenance", (folder.dir() / "run.json").string());
  }
  return c.verified() == c.total() ? exit_ok : exit_unverified;
}

void add_decode_options(po::options_description& o, pipeline::DecodeSettings& s, std::vector<std::string>& params) {
  o.add_options()
      ("detector", po::value(&s.detector)->default_value(s.detector), "detector plugin (see salvor plugins)")
      ("param", po::value(&params)->composing(), "detector parameter KEY=VALUE (repeatable)")
      ("target", po::value(&s.target), "equalizer target instead of the detector's own (PR4, EPR4, E2PR4, GPR)")
      ("gpr-length", po::value(&s.gpr_length)->default_value(s.gpr_length), "taps of a generalized target (3..5)")
      ("samples-per-bit", po::value(&s.samples_per_bit)->default_value(s.samples_per_bit), "resampler output per channel bit")
      ("pll-bandwidth", po::value(&s.pll_track_bandwidth)->default_value(s.pll_track_bandwidth), "PLL noise bandwidth B_nT while tracking")
      ("pw50", po::value(&s.pw50_bits)->default_value(s.pw50_bits), "channel PW50 guess in bit periods (initial equalizers)")
      ("eq-taps", po::value(&s.equalizer_taps)->default_value(s.equalizer_taps), "equalizer taps (5..31)")
      ("eq-step", po::value(&s.equalizer_step)->default_value(s.equalizer_step), "equalizer NLMS step (0..2)")
      ("sync-tolerance", po::value(&s.sync_tolerance)->default_value(s.sync_tolerance), "sync-mark Hamming tolerance (-1: the format's)");
}

pipeline::DecodeSettings finish_settings(pipeline::DecodeSettings s, const std::vector<std::string>& params) {
  s.detector_params = parse_params(params);
  if (s.equalizer_taps < 5 || s.equalizer_taps > 31) throw Error(ErrorKind::usage, "--eq-taps", "must be 5..31");
  if (!(s.equalizer_step > 0 && s.equalizer_step < 2)) throw Error(ErrorKind::usage, "--eq-step", "must be in (0, 2)");
  if (!(s.pw50_bits > 0.3 && s.pw50_bits < 8)) throw Error(ErrorKind::usage, "--pw50", "must be in (0.3, 8) bit periods");
  return s;
}

int run_decode(const std::vector<std::string>& args) {
  return guarded("decode", [&]() {
    pipeline::DecodeSettings s;
    std::vector<std::string> inputs, params;
    std::string out, format;
    unsigned threads = 0;
    int fill_byte = -1;
    bool fill_unverified = false, json = false, quiet = false;
    po::options_description o("decode options");
    o.add_options()
        ("out,o", po::value(&out)->required(), "output folder (must not hold an earlier decode)")
        ("format", po::value(&format), "track format descriptor (name or path); default: from the manifest")
        ("threads", po::value(&threads)->default_value(0),
         "worker threads (0 = all cores); with two or more per capture, each capture is decoded on two")
        ("fill-unverified", po::bool_switch(&fill_unverified), "write the fill pattern instead of a failed sector's best guess")
        ("fill-byte", po::value(&fill_byte)->default_value(-1), "fill byte 0..255 (-1: a text marker naming the LBA)")
        ("json", po::bool_switch(&json), "print the summary as JSON")
        ("quiet,q", po::bool_switch(&quiet), "no progress bar");
    add_decode_options(o, s, params);
    o.add_options()("inputs", po::value(&inputs)->multitoken(), "captures, manifests or folders");
    po::positional_options_description pos;
    pos.add("inputs", -1);
    po::variables_map vm;
    if (!parse_command_line("decode", "INPUTS... --out DIR [options]", args, o, pos, vm)) return static_cast<int>(exit_ok);
    if (inputs.empty()) throw Error(ErrorKind::usage, "salvor decode", "no inputs (captures, a manifest or a folder)");
    if (fill_byte < -1 || fill_byte > 255) throw Error(ErrorKind::usage, "--fill-byte", "must be -1..255");
    s = finish_settings(s, params);

    const auto t0 = std::chrono::steady_clock::now();
    std::vector<fs::path> in_paths(inputs.begin(), inputs.end());
    pipeline::Job job = pipeline::make_job(in_paths);
    format::TrackFormat fmt = pipeline::resolve_job_format(job, format);

    fs::path dir = out;
    if (fs::exists(dir / "run.json") || fs::exists(dir / "image.bin"))
      throw Error(ErrorKind::usage, dir.string(),
                  "already holds a decode; use salvor retry on it, or choose another --out");

    std::vector<fs::path> search;
    for (const auto& d : plugin_search_dirs()) search.emplace_back(d);
    detect::PluginHost host(search);

    results::DecodeFolder folder(dir, pipeline::geometry_of(fmt));
    pipeline::JobRunOptions ro;
    ro.threads = threads;
    if (!quiet && stderr_is_terminal())
      ro.progress = [](size_t d, size_t n) { draw_progress("decoding captures", d, n); };
    pipeline::JobRunResult rr = pipeline::run_job(job, fmt, host, s, folder, ro);

    nlohmann::json& run = folder.run_info();
    run["salvor_run"] = 1;
    run["command"] = "decode";
    run["salvor_version"] = version_string();
    run["arguments"] = args;
    run["format"] = {{"name", fmt.name}, {"path", fmt.source.string()}};
    run["settings"] = pipeline::settings_json(s);
    run["threads"] = threads ? threads : std::max(1u, std::thread::hardware_concurrency());
    nlohmann::json plugins = nlohmann::json::array();
    for (const auto* d : host.detectors())
      plugins.push_back({{"name", d->name}, {"version", d->version}, {"path", d->path.string()}});
    run["plugins"] = plugins;
    run["inputs"] = pipeline::hash_inputs(job, fmt, threads);
    nlohmann::json caps = nlohmann::json::array();
    for (const auto& c : rr.captures) caps.push_back(c.to_json());
    run["captures"] = caps;
    run["job"] = {{"name", job.name}, {"captures", job.captures.size()}};
    run["fill"] = {{"fill_unverified", fill_unverified}, {"fill_byte", fill_byte}};
    std::string sha = folder.write(results::FillPolicy{fill_unverified, fill_byte});
    double secs = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    return print_folder_summary(folder, sha, json, {{"seconds", secs}, {"captures", job.captures.size()}});
  });
}

}  // namespace salvor::cli
