#pragma once
// Helpers for end-to-end tests: run the built programs as a user would, read their
// outputs, compare with the simulator's ground truth.

#include <sys/wait.h>
#include <unistd.h>

#include <array>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <sstream>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "cli_test_util.hpp"

namespace e2e {

namespace fs = std::filesystem;

struct RunResult {
  int exit_code = -1;
  std::string out;  // stdout and stderr together
};

inline RunResult run(const std::string& command) {
  RunResult r;
  std::string cmd = command + " 2>&1";
  FILE* p = popen(cmd.c_str(), "r");
  if (!p) return r;
  std::array<char, 4096> buf;
  size_t n;
  while ((n = fread(buf.data(), 1, buf.size(), p)) > 0) r.out.append(buf.data(), n);
  int status = pclose(p);
  r.exit_code = WIFEXITED(status) ? WEXITSTATUS(status) : -1;
  return r;
}

inline std::string bin(const char* name) { return std::string(SALVOR_BIN_DIR) + "/" + name; }

inline fs::path scratch(const std::string& name) {
  fs::path d = fs::temp_directory_path() / ("salvor-e2e-" + name);
  fs::remove_all(d);
  fs::create_directories(d);
  return d;
}

using cli_test::read_json;
using cli_test::slurp;

inline std::vector<nlohmann::json> read_jsonl(const fs::path& p) {
  std::vector<nlohmann::json> v;
  std::ifstream in(p);
  for (std::string line; std::getline(in, line);)
    if (!line.empty()) v.push_back(nlohmann::json::parse(line));
  return v;
}

// Synthesizes a scenario once (the simulator is deterministic). Tests may run in
// parallel processes, so each synthesizes into a folder of its own and renames it into
// place; whoever renames first wins and the others use that folder.
inline fs::path synth(const std::string& scenario, const std::string& extra, const std::string& tag) {
  fs::path d = fs::temp_directory_path() / ("salvor-e2e-synth-" + tag);
  if (fs::exists(d / "manifest.json")) return d;
  fs::path mine = fs::temp_directory_path() / ("salvor-e2e-synth-" + tag + ".tmp-" + std::to_string(::getpid()));
  fs::remove_all(mine);
  RunResult r = run(bin("salvor-synth") + " --scenario " + scenario + " --out " + mine.string() + " -q " + extra);
  if (r.exit_code != 0) throw std::runtime_error("salvor-synth failed: " + r.out);
  std::error_code ec;
  fs::rename(mine, d, ec);  // fails if another process got there first
  if (ec) fs::remove_all(mine);
  if (!fs::exists(d / "manifest.json")) throw std::runtime_error("no synth output in " + d.string());
  return d;
}

// Sectors whose bytes in `image` differ from `truth` (both whole images).
inline bool sector_equal(const std::string& image, const std::string& truth, uint64_t lba, size_t bytes) {
  return image.compare(lba * bytes, bytes, truth, lba * bytes, bytes) == 0;
}

}  // namespace e2e
