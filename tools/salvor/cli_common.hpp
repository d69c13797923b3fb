#pragma once
// Shared plumbing for salvor subcommands: option parsing with Boost.ProgramOptions,
// --help text, and the mapping from salvor::Error to the documented exit codes.

#include <boost/program_options.hpp>
#include <functional>
#include <string>
#include <vector>

namespace salvor::cli {

namespace po = boost::program_options;

struct Command {
  const char* name;
  const char* summary;  // one line for `salvor --help`
  int (*run)(const std::vector<std::string>& args);  // args after the command name
};

// Parses `args` against `visible` (+ positional). Prints help and returns false on --help.
// Throws salvor::Error(usage) on a bad command line.
bool parse_command_line(const std::string& command, const std::string& synopsis,
                        const std::vector<std::string>& args, po::options_description& visible,
                        const po::positional_options_description& positional,
                        po::variables_map& vm);

// Runs `body`, turning exceptions into a message on stderr and an exit code.
int guarded(const std::string& command, const std::function<int()>& body);

// The plugin search path every command uses: $SALVOR_PLUGIN_PATH, the build folder's
// plugin directory, the install directory (never the current directory).
std::vector<std::string> plugin_search_dirs();

// A one-line progress bar on stderr ("label [=====>    ] 12/40"), redrawn in place.
void draw_progress(const std::string& label, size_t done, size_t total);

bool stdout_is_terminal();
bool stderr_is_terminal();

}  // namespace salvor::cli
