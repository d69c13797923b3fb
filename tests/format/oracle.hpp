#pragma once
// Runs a Python oracle with Debian's interpreter (SALVOR_ORACLE_PYTHON, /usr/bin/python3,
// which has python3-crcmod / numpy). The script reads `input` on stdin; its stdout is returned.

#include <unistd.h>

#include <cstdio>
#include <filesystem>
#include <fstream>
#include <string>

namespace salvor_test {

inline std::string run_oracle(const std::string& script, const std::string& input, int* status = nullptr) {
  namespace fs = std::filesystem;
  const fs::path dir = fs::temp_directory_path() / ("salvor-format-oracle-" + std::to_string(::getpid()));
  fs::create_directories(dir);
  const fs::path script_path = dir / "oracle.py";
  const fs::path input_path = dir / "input.txt";
  std::ofstream(script_path) << script;
  std::ofstream(input_path) << input;
  const std::string cmd = std::string(SALVOR_ORACLE_PYTHON) + " " + script_path.string() + " < " + input_path.string();
  std::string out;
  if (FILE* p = ::popen(cmd.c_str(), "r")) {
    char buf[4096];
    size_t n;
    while ((n = std::fread(buf, 1, sizeof buf, p)) > 0) out.append(buf, n);
    const int rc = ::pclose(p);
    if (status) *status = rc;
  } else if (status) {
    *status = -1;
  }
  fs::remove_all(dir);
  return out;
}

}  // namespace salvor_test
