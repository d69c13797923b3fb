#include "cli_common.hpp"

#include <cstdio>
#include <iostream>
#include <unistd.h>

#include "common/error.hpp"

namespace salvor::cli {

bool parse_command_line(const std::string& command, const std::string& synopsis,
                        const std::vector<std::string>& args, po::options_description& visible,
                        const po::positional_options_description& positional,
                        po::variables_map& vm) {
  visible.add_options()("help,h", "show this help");
  try {
    po::store(po::command_line_parser(args).options(visible).positional(positional).run(), vm);
    if (vm.count("help")) {
      std::cout << "usage: salvor " << command << " " << synopsis << "\n\n" << visible << "\n";
      return false;
    }
    po::notify(vm);
  } catch (const po::error& e) {
    throw Error(ErrorKind::usage, "salvor " + command, std::string(e.what()) + " (see --help)");
  }
  return true;
}

int guarded(const std::string& command, const std::function<int()>& body) {
  try {
    return body();
  } catch (const Error& e) {
    std::cerr << "salvor " << command << ": " << e.what() << "\n";
    return exit_code(e.kind());
  } catch (const std::bad_alloc&) {
    std::cerr << "salvor " << command << ": out of memory\n";
    return exit_internal;
  } catch (const std::exception& e) {
    std::cerr << "salvor " << command << ": internal error: " << e.what() << "\n";
    return exit_internal;
  }
}

bool stdout_is_terminal() { return ::isatty(STDOUT_FILENO) == 1; }
bool stderr_is_terminal() { return ::isatty(STDERR_FILENO) == 1; }

}  // namespace salvor::cli
