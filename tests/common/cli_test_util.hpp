#pragma once
// Helpers for tests that run the salvor programs as a user would: one scratch folder per
// test process (removed when the tests end), running a command line with the build's
// plugins, reading files back.

#include <gtest/gtest.h>
#include <sys/wait.h>
#include <unistd.h>

#include <cerrno>  // program_invocation_short_name (GNU)
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <sstream>
#include <string>

#include <nlohmann/json.hpp>

namespace cli_test {

namespace fs = std::filesystem;

// <temp>/salvor-test-<program>-<pid>: created once, empty at the start.
inline const fs::path& scratch_root() {
  static const fs::path root = [] {
    fs::path p = fs::temp_directory_path() /
                 ("salvor-test-" + std::string(program_invocation_short_name) + "-" + std::to_string(::getpid()));
    fs::remove_all(p);
    fs::create_directories(p);
    return p;
  }();
  return root;
}

// Removes the scratch folder when the tests end (registered once per test program).
class RemoveScratch : public ::testing::Environment {
 public:
  void TearDown() override {
    std::error_code ec;
    fs::remove_all(scratch_root(), ec);
  }
};
inline const auto* const kRemoveScratch = ::testing::AddGlobalTestEnvironment(new RemoveScratch);

inline std::string slurp(const fs::path& p) {
  std::ifstream in(p, std::ios::binary);
  std::stringstream ss;
  ss << in.rdbuf();
  return ss.str();
}

inline nlohmann::json read_json(const fs::path& p) { return nlohmann::json::parse(slurp(p)); }

struct CmdResult {
  int code;
  std::string out, err;
};

// Runs a command line with the build's plugins; its exit code, stdout and stderr.
inline CmdResult run(const std::string& command) {
  static int n = 0;
  ++n;
  const fs::path out = scratch_root() / ("stdout-" + std::to_string(n));
  const fs::path err = scratch_root() / ("stderr-" + std::to_string(n));
  const std::string full = "SALVOR_PLUGIN_PATH='" + std::string(SALVOR_PLUGIN_BUILD_DIR) + "' " + command +
                           " > '" + out.string() + "' 2> '" + err.string() + "'";
  const int st = std::system(full.c_str());
  return {WIFEXITED(st) ? WEXITSTATUS(st) : -1, slurp(out), slurp(err)};
}

}  // namespace cli_test
