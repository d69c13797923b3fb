// salvor: recover data from raw readback waveforms. This file only dispatches to the
// subcommands; each lives in its own cmd_<name>.cpp and is listed in kCommands below.

#include <cstring>
#include <iostream>
#include <string>
#include <vector>

#include "cli_common.hpp"
#include "common/error.hpp"
#include "common/version.hpp"

namespace salvor::cli {
// Subcommands (declared here, defined in cmd_<name>.cpp). Add a line to kCommands too.
int run_inspect(const std::vector<std::string>& args);
int run_plugins(const std::vector<std::string>& args);
int run_decode(const std::vector<std::string>& args);
int run_retry(const std::vector<std::string>& args);
int run_report(const std::vector<std::string>& args);
int run_merge(const std::vector<std::string>& args);
int run_compare(const std::vector<std::string>& args);
}  // namespace salvor::cli

namespace {

using salvor::cli::Command;

const Command kCommands[] = {
    {"inspect", "what is in a capture: rate, SNR, density, sectors seen", salvor::cli::run_inspect},
    {"decode", "decode captures or a manifest into a recovered image, map and log", salvor::cli::run_decode},
    {"retry", "re-decode what is not verified with other detectors and settings", salvor::cli::run_retry},
    {"merge", "best result of every sector across decode folders of one drive", salvor::cli::run_merge},
    {"compare", "detectors side by side on a corpus with ground truth: tables and plots", salvor::cli::run_compare},
    {"report", "a self-contained HTML report with plots of a decode folder", salvor::cli::run_report},
    {"plugins", "the detector plugins that can be loaded, and files refused", salvor::cli::run_plugins},
    {nullptr, nullptr, nullptr},
};

void print_usage(std::ostream& os) {
  os << "salvor " << salvor::version_string()
     << ": recover sectors from raw hard-drive readback waveforms\n\n"
        "usage: salvor COMMAND [options]     (salvor COMMAND --help for its options)\n\n"
        "commands:\n";
  for (const Command* c = kCommands; c->name; ++c) {
    os << "  " << c->name << std::string(10 - std::strlen(c->name), ' ') << c->summary << "\n";
  }
  os << "\noptions:\n"
        "  -h, --help     show this help\n"
        "  --version      print the version\n\n"
        "exit codes: 0 done, 2 usage error, 3 bad input, 4 finished with unverified sectors,\n"
        "            5 output not writable, 9 internal error\n";
}

}  // namespace

int main(int argc, char** argv) {
  if (argc < 2) {
    print_usage(std::cerr);
    return salvor::exit_usage;
  }
  std::string first = argv[1];
  if (first == "--help" || first == "-h" || first == "help") {
    print_usage(std::cout);
    return salvor::exit_ok;
  }
  if (first == "--version") {
    std::cout << "salvor " << salvor::version_string() << "\n";
    return salvor::exit_ok;
  }
  for (const Command* c = kCommands; c->name; ++c) {
    if (first == c->name) {
      std::vector<std::string> args(argv + 2, argv + argc);
      return c->run(args);
    }
  }
  std::cerr << "salvor: unknown command '" << first << "' (see salvor --help)\n";
  return salvor::exit_usage;
}
