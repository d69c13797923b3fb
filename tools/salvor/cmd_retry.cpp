// salvor retry DIR: re-decode the sectors of a decode folder that are not verified, with
// other detectors and settings, LLRs summed across revolutions, and the erasure and
// Chase-style searches. Never makes a sector worse; can be interrupted and run again.

#include <chrono>
#include <filesystem>
#include <iostream>
#include <sstream>

#include "cli_common.hpp"
#include "common/error.hpp"
#include "common/sha256.hpp"
#include "common/version.hpp"
#include "detect/plugin_host.hpp"
#include "format/track_format.hpp"
#include "pipeline/decode_job.hpp"
#include "pipeline/retry.hpp"
#include "report_waveform.hpp"
#include "results/decode_folder.hpp"

namespace salvor::cli {

namespace fs = std::filesystem;

int print_folder_summary(const results::DecodeFolder& folder, const std::string& image_sha, bool as_json,
                         const nlohmann::json& extra);

namespace {

std::vector<std::string> split_list(const std::string& s) {
  std::vector<std::string> out;
  std::stringstream in(s);
  for (std::string item; std::getline(in, item, ',');)
    if (!item.empty()) out.push_back(item);
  return out;
}

}  // namespace

int run_retry(const std::vector<std::string>& args) {
  return guarded("retry", [&]() -> int {
    std::string dir_arg, detectors = "all";
    double budget = 0;
    unsigned threads = 0;
    bool json = false, quiet = false;
    po::options_description o("retry options");
    o.add_options()
        ("detectors", po::value(&detectors)->default_value(detectors), "detectors to try: a comma-separated list, or all")
        ("budget", po::value(&budget)->default_value(0), "stop starting new strategies after this many seconds (0: no limit)")
        ("threads", po::value(&threads)->default_value(0), "worker threads (0 = all cores)")
        ("json", po::bool_switch(&json), "print the summary as JSON")
        ("quiet,q", po::bool_switch(&quiet), "no progress bar")
        ("dir", po::value(&dir_arg), "decode folder");
    po::positional_options_description pos;
    pos.add("dir", 1);
    po::variables_map vm;
    if (!parse_command_line("retry", "DIR [options]", args, o, pos, vm)) return exit_ok;
    if (dir_arg.empty()) throw Error(ErrorKind::usage, "", "no decode folder given");
    if (budget < 0) throw Error(ErrorKind::usage, "--budget", "must be >= 0");

    const fs::path dir = dir_arg;
    results::DecodeFolder folder = results::DecodeFolder::open(dir);
    nlohmann::json& run = folder.run_info();
    const std::string run_where = (dir / "run.json").string();
    if (!run.contains("format") || !run.contains("captures") || !run.contains("inputs"))
      throw Error(ErrorKind::input, run_where, "not written by salvor decode (no format, captures or inputs)");

    // The captures must be the ones the decode read: same SHA-256.
    for (const auto& in : run["inputs"]) {
      if (in.value("role", "") != "capture") continue;
      fs::path p = in.value("path", "");
      if (!fs::exists(p)) throw Error(ErrorKind::input, p.string(), "capture named in " + run_where + " is missing");
      if (sha256_file_hex(p) != in.value("sha256", ""))
        throw Error(ErrorKind::input, p.string(), "capture changed since the decode (SHA-256 differs from " + run_where + ")");
    }
    format::TrackFormat fmt = [&]() {
      std::string path = run["format"].value("path", "");
      if (!path.empty() && fs::exists(path)) return format::load_track_format(path);
      return format::load_track_format(format::find_track_format(run["format"].value("name", "")));
    }();

    pipeline::Job job;
    job.name = run.value("job", nlohmann::json::object()).value("name", "job");
    for (const auto& c : run["captures"]) {
      pipeline::JobCapture jc;
      jc.path = c.value("path", "");
      if (c.value("cylinder", -1) >= 0) jc.cylinder = c["cylinder"].get<int>();
      if (c.value("head", -1) >= 0) jc.head = c["head"].get<int>();
      if (c.value("revolution", -1) >= 0) jc.revolution = c["revolution"].get<int>();
      job.captures.push_back(jc);
    }

    std::vector<fs::path> search;
    for (const auto& d : plugin_search_dirs()) search.emplace_back(d);
    detect::PluginHost host(search);
    pipeline::DecodeSettings base = settings_from_json(run.value("settings", nlohmann::json::object()), run_where);
    std::vector<std::string> wanted = detectors == "all" ? std::vector<std::string>{} : split_list(detectors);
    for (const auto& w : wanted)
      if (!host.find(w)) throw Error(ErrorKind::usage, "--detectors", "no detector plugin named '" + w + "'");
    auto strategies = pipeline::retry_strategies(base, host, wanted);

    pipeline::RetryOptions ro;
    ro.threads = threads;
    ro.budget_seconds = budget;
    if (!run.contains("retry_history")) run["retry_history"] = nlohmann::json::array();
    for (const auto& h : run["retry_history"]) ro.already_tried.push_back(h.value("strategy", ""));
    if (!quiet && stderr_is_terminal())
      ro.progress = [](const std::string& s, size_t d, size_t n) { draw_progress("retry " + s, d, n); };
    std::string image_sha = run.value("outputs", nlohmann::json::object()).value("image.bin", nlohmann::json::object()).value("sha256", "");
    ro.after_strategy = [&](const nlohmann::json& sr) {
      // Checkpoint: the folder now holds this strategy's attempts and names it as tried.
      nlohmann::json entry = sr;
      entry["salvor_version"] = version_string();
      run["retry_history"].push_back(entry);
      image_sha = folder.write(results::FillPolicy{run.value("fill", nlohmann::json::object()).value("fill_unverified", false),
                                                   run.value("fill", nlohmann::json::object()).value("fill_byte", -1)});
    };
    pipeline::RetryReport rep = pipeline::run_retry(job, fmt, host, strategies, folder, ro);

    nlohmann::json extra = {{"retry", {{"strategies", rep.strategies},
                                       {"recovered", rep.recovered},
                                       {"budget_exhausted", rep.budget_exhausted},
                                       {"nothing_to_do", rep.nothing_to_do}}}};
    if (!json) {
      if (rep.nothing_to_do) {
        std::cout << "retry: nothing new to try (every strategy is in the folder's history, or all sectors verified)\n";
      } else {
        std::cout << "retry strategies, in order\n";
        for (const auto& s : rep.strategies)
          std::cout << "  " << s["strategy"].get<std::string>() << ": " << s["recovered"].get<size_t>()
                    << " recovered (" << s["attempts"].get<size_t>() << " attempts)\n";
        if (rep.budget_exhausted) std::cout << "  (stopped at the budget; run again to continue)\n";
        std::cout << "recovered by this retry: " << rep.recovered << "\n";
      }
    }
    return print_folder_summary(folder, image_sha, json, extra);
  });
}

}  // namespace salvor::cli
