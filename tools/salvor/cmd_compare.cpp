// salvor compare CORPUS: detectors side by side on a corpus with ground truth (see
// core/compare). Prints an aligned table; writes compare.md, compare.csv, compare.json and
// SVG plots into an output folder. Exit 0 when done, 4 when any sector was reported
// verified with wrong bytes (a silent error, also printed loudly on stderr).

#include <chrono>
#include <filesystem>
#include <iostream>
#include <sstream>
#include <thread>

#include "cli_common.hpp"
#include "common/error.hpp"
#include "common/version.hpp"
#include "compare/corpus.hpp"
#include "compare/report.hpp"
#include "compare/run_compare.hpp"
#include "detect/plugin_host.hpp"
#include "pipeline/decode_job.hpp"

namespace salvor::cli {

namespace fs = std::filesystem;

int run_compare(const std::vector<std::string>& args) {
  return guarded("compare", [&]() {
    std::string corpus_arg, detectors = "viterbi", out;
    unsigned threads = 0;
    bool json = false, quiet = false, keep = false;
    po::options_description o("compare options");
    o.add_options()
        ("detectors", po::value(&detectors)->default_value(detectors),
         "comma-separated detector plugins, or 'all' (every plugin whose target the pipeline supports)")
        ("out,o", po::value(&out), "output folder (default: ./compare-<corpus name>; must not exist or be empty)")
        ("threads", po::value(&threads)->default_value(0), "worker threads (0 = all cores)")
        ("keep-decodes", po::bool_switch(&keep), "also write every decode as a folder under OUT/decodes/DETECTOR/ENTRY")
        ("json", po::bool_switch(&json), "print compare.json on stdout instead of the table")
        ("quiet,q", po::bool_switch(&quiet), "no progress bar");
    o.add_options()("corpus", po::value(&corpus_arg), "corpus folder or its corpus.json");
    po::positional_options_description pos;
    pos.add("corpus", 1);
    po::variables_map vm;
    if (!parse_command_line("compare", "CORPUS [--detectors LIST|all] [--out DIR] [--json] [--threads N]", args, o,
                            pos, vm))
      return static_cast<int>(exit_ok);
    if (corpus_arg.empty()) throw Error(ErrorKind::usage, "salvor compare", "no corpus given (a folder with corpus.json)");

    const auto t0 = std::chrono::steady_clock::now();
    compare::Corpus corpus = compare::read_corpus(corpus_arg);
    const fs::path dir = out.empty() ? fs::path("compare-" + corpus.name) : fs::path(out);
    if (fs::exists(dir) && (!fs::is_directory(dir) || !fs::is_empty(dir)))
      throw Error(ErrorKind::usage, dir.string(), "already exists and is not empty; choose another --out");

    std::vector<fs::path> search;
    for (const auto& d : plugin_search_dirs()) search.emplace_back(d);
    detect::PluginHost host(search);

    compare::CompareOptions opt;
    if (detectors == "all") {
      opt.detectors = compare::comparable_detectors(host);
      if (opt.detectors.empty()) throw Error(ErrorKind::usage, "--detectors", "no loadable detector plugins (see salvor plugins)");
    } else {
      std::stringstream ss(detectors);
      std::string item;
      while (std::getline(ss, item, ','))
        if (!item.empty()) opt.detectors.push_back(item);
      if (opt.detectors.empty()) throw Error(ErrorKind::usage, "--detectors", "'" + detectors + "' names no detector");
    }
    opt.threads = threads;
    if (keep) opt.keep_decodes = dir / "decodes";
    if (!quiet && stderr_is_terminal())
      opt.progress = [](size_t d, size_t n) { draw_progress("decoding corpus", d, n); };
    compare::CompareResult r = compare::run_compare(corpus, host, opt);

    nlohmann::json prov;
    prov["salvor_version"] = version_string();
    prov["arguments"] = args;
    prov["settings"] = pipeline::settings_json(opt.settings);
    prov["threads"] = threads ? threads : std::max(1u, std::thread::hardware_concurrency());
    nlohmann::json plugins = nlohmann::json::array();
    for (const auto& name : opt.detectors) {
      const auto* d = host.find(name);
      plugins.push_back({{"name", d->name}, {"version", d->version}, {"target", d->target}, {"path", d->path.string()}});
    }
    prov["plugins"] = plugins;
    prov["seconds"] = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    compare::write_report(dir, corpus, r, prov);

    if (json) std::cout << compare::report_json(corpus, r, prov).dump(2) << "\n";
    else {
      std::cout << compare::report_table(corpus, r);
      std::cout << "written to " << dir.string() << ": compare.md, compare.csv, compare.json";
      for (const auto& f : compare::plot_file_names()) std::cout << ", " << f;
      std::cout << "\n";
    }
    const uint64_t silent = r.silent_errors();
    if (silent) {
      std::cerr << "\n*** salvor compare: " << silent
                << " SILENT ERROR(S): sectors reported verified whose bytes differ from the truth ***\n";
      for (const auto& s : r.scores)
        for (const auto& d : s.silent_detail) std::cerr << "***   " << s.detector << " / " << s.entry << ": " << d << "\n";
      return static_cast<int>(exit_unverified);
    }
    return static_cast<int>(exit_ok);
  });
}

}  // namespace salvor::cli
