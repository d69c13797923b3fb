// salvor-synth: the readback simulator. Renders a scenario (corpora/scenarios/*.toml) into
// capture files with sidecars, a manifest and the ground truth (see synth_run.hpp).

#include <boost/program_options.hpp>
#include <iostream>
#include <nlohmann/json.hpp>
#include <string>

#include "common/error.hpp"
#include "common/version.hpp"
#include "format/track_format.hpp"
#include "synth/scenario.hpp"
#include "synth/synth_run.hpp"

namespace po = boost::program_options;

namespace {

int run(int argc, char** argv) {
  po::options_description opts("options");
  opts.add_options()
      ("scenario,s", po::value<std::string>(), "scenario name (corpora/scenarios/NAME.toml) or path to a .toml file")
      ("out,o", po::value<std::string>(), "output folder (created; must be empty unless --overwrite)")
      ("seed", po::value<uint64_t>(), "seed for every random stream (default: the scenario's)")
      ("container", po::value<std::string>(), "capture container: wav, rf64, w64, flac, sigmf, zstd")
      ("sample-format", po::value<std::string>(), "digitizer samples: int8, int16, float32")
      ("revolutions", po::value<int>(), "revolutions per track (1..16)")
      ("tracks", po::value<std::string>(), "only these tracks: CYL:HEAD items, comma-separated; CYL and HEAD may be a-b or *")
      ("bitstreams", "also write each track's noiseless channel bits to truth/bits/")
      ("overwrite", "replace an earlier synth output in the folder")
      ("json", "print a summary as JSON on stdout")
      ("quiet,q", "print nothing but errors")
      ("version", "print the version")
      ("help,h", "show this help");
  po::variables_map vm;
  try {
    po::store(po::parse_command_line(argc, argv, opts), vm);
    po::notify(vm);
  } catch (const po::error& e) {
    throw salvor::Error(salvor::ErrorKind::usage, "salvor-synth", std::string(e.what()) + " (see --help)");
  }
  if (vm.count("help")) {
    std::cout << "salvor-synth " << salvor::version_string()
              << ": simulate readback captures of a drive from a scenario\n\n"
                 "usage: salvor-synth --scenario NAME|PATH --out DIR [options]\n\n"
              << opts
              << "\nexit codes: 0 done, 2 usage error, 3 bad input, 5 output not writable, 9 internal error\n";
    return salvor::exit_ok;
  }
  if (vm.count("version")) {
    std::cout << "salvor-synth " << salvor::version_string() << "\n";
    return salvor::exit_ok;
  }
  if (!vm.count("scenario")) salvor::throw_usage("salvor-synth", "--scenario is required (see --help)");
  if (!vm.count("out")) salvor::throw_usage("salvor-synth", "--out is required (see --help)");

  using namespace salvor::synth;
  const Scenario sc = load_scenario(find_scenario(vm["scenario"].as<std::string>()));
  RunOptions ro;
  ro.out = vm["out"].as<std::string>();
  if (vm.count("seed")) ro.seed = vm["seed"].as<uint64_t>();
  if (vm.count("container")) ro.container = container_from_string(vm["container"].as<std::string>(), "--container");
  if (vm.count("sample-format"))
    ro.sample_format = sample_format_from_string(vm["sample-format"].as<std::string>(), "--sample-format");
  if (vm.count("revolutions")) ro.revolutions = vm["revolutions"].as<int>();
  if (vm.count("tracks")) {
    // The geometry comes from the descriptor; load it once here to check the list.
    const auto fmt = salvor::format::load_track_format(
        sc.format.find('/') != std::string::npos || std::filesystem::path(sc.format).extension() == ".toml"
            ? (std::filesystem::path(sc.format).is_absolute() ? std::filesystem::path(sc.format)
                                                                : sc.source.parent_path() / sc.format)
            : salvor::format::find_track_format(sc.format));
    ro.tracks = parse_track_list(vm["tracks"].as<std::string>(), fmt.cylinders, fmt.heads);
  }
  ro.bitstreams = vm.count("bitstreams") > 0;
  ro.overwrite = vm.count("overwrite") > 0;
  const bool quiet = vm.count("quiet") > 0;
  if (!quiet) ro.progress = [](const std::string& line) { std::cerr << "salvor-synth: " << line << "\n"; };
  const RunSummary s = run_scenario(sc, ro);
  if (vm.count("json")) {
    nlohmann::json j = {{"scenario", s.scenario}, {"seed", s.seed},          {"captures", s.captures},
                        {"samples", s.samples},   {"bytes", s.bytes},        {"damaged_sector_entries", s.damaged_sector_entries},
                        {"manifest", s.manifest.string()}};
    std::cout << j.dump(2) << "\n";
  } else if (!quiet) {
    std::cerr << "salvor-synth: " << s.captures << " captures, " << s.samples << " samples, " << s.bytes
              << " bytes, " << s.damaged_sector_entries << " damaged sector entries; manifest " << s.manifest.string()
              << "\n";
  }
  return salvor::exit_ok;
}

}  // namespace

int main(int argc, char** argv) {
  try {
    return run(argc, argv);
  } catch (const salvor::Error& e) {
    std::cerr << "salvor-synth: " << e.what() << "\n";
    return salvor::exit_code(e.kind());
  } catch (const std::bad_alloc&) {
    std::cerr << "salvor-synth: out of memory\n";
    return salvor::exit_internal;
  } catch (const std::exception& e) {
    std::cerr << "salvor-synth: internal error: " << e.what() << "\n";
    return salvor::exit_internal;
  }
}
