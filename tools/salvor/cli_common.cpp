#include "cli_common.hpp"

#include <cstdio>
#include <cstdlib>
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
    // guarded() puts "salvor <command>: " in front of the message.
    throw Error(ErrorKind::usage, "", std::string(e.what()) + " (see --help)");
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

std::vector<std::string> plugin_search_dirs() {
  std::vector<std::string> dirs;
  const char* env = std::getenv("SALVOR_PLUGIN_PATH");
  if (env) {
    std::string v = env;
    size_t start = 0;
    while (start <= v.size()) {
      size_t colon = v.find(':', start);
      std::string part = v.substr(start, colon == std::string::npos ? std::string::npos : colon - start);
      if (!part.empty()) dirs.push_back(part);
      if (colon == std::string::npos) break;
      start = colon + 1;
    }
  }
  dirs.push_back(SALVOR_PLUGIN_BUILD_DIR);
  dirs.push_back(SALVOR_PLUGIN_INSTALL_DIR);
  return dirs;
}

void draw_progress(const std::string& label, size_t done, size_t total) {
  const int width = 30;
  int filled = total ? static_cast<int>(width * done / total) : width;
  std::string bar(static_cast<size_t>(filled), '=');
  if (filled < width) bar += '>';
  bar.resize(static_cast<size_t>(width), ' ');
  std::fprintf(stderr, "\r%s [%s] %zu/%zu", label.c_str(), bar.c_str(), done, total);
  if (done >= total) std::fprintf(stderr, "\n");
  std::fflush(stderr);
}

bool stdout_is_terminal() { return ::isatty(STDOUT_FILENO) == 1; }
bool stderr_is_terminal() { return ::isatty(STDERR_FILENO) == 1; }

}  // namespace salvor::cli
