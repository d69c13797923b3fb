// CLI test of `salvor plugins`: runs the built program with SALVOR_PLUGIN_PATH pointing at
// the fixture folder (good and broken test plugins) and checks the JSON it prints
// (parsed with nlohmann::json), the text listing and the exit codes (DEVELOPERS.md table).

#include <gtest/gtest.h>
#include <sys/wait.h>
#include <unistd.h>

#include <algorithm>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>
#include <set>
#include <string>

namespace fs = std::filesystem;

namespace {

struct Result {
  int exit_code = -1;
  std::string out;
};

Result run(const std::string& env, const std::string& args) {
  const std::string cmd = env + " " + std::string(SALVOR_BIN_DIR) + "/salvor " + args + " 2>/dev/null";
  Result r;
  FILE* pipe = popen(cmd.c_str(), "r");
  if (!pipe) return r;
  char buf[4096];
  while (size_t got = fread(buf, 1, sizeof buf, pipe)) r.out.append(buf, got);
  const int status = pclose(pipe);
  r.exit_code = WIFEXITED(status) ? WEXITSTATUS(status) : -1;
  return r;
}

}  // namespace

TEST(CliPlugins, JsonListsGoodDetectorsAndRefusedFiles) {
  const fs::path extra = fs::temp_directory_path() / ("salvor-test-cli-" + std::to_string(::getpid()));
  fs::create_directories(extra);
  std::ofstream(extra / "x.so") << "not a library\n";
  const Result r = run("SALVOR_PLUGIN_PATH='" + std::string(SALVOR_TEST_PLUGIN_DIR) + ":" + extra.string() + "'",
                       "plugins --json");
  fs::remove_all(extra);
  ASSERT_EQ(r.exit_code, 0) << r.out;
  const nlohmann::json j = nlohmann::json::parse(r.out);
  ASSERT_TRUE(j["detectors"].is_array());
  std::set<std::string> names;
  for (const auto& d : j["detectors"]) {
    for (const char* key : {"name", "version", "target", "soft_output", "parameters", "path", "description"}) {
      EXPECT_TRUE(d.contains(key)) << key;
    }
    EXPECT_TRUE(d["soft_output"].is_boolean());
    for (const auto& p : d["parameters"]) {
      for (const char* key : {"key", "type", "default", "units", "help"}) EXPECT_TRUE(p.contains(key)) << key;
    }
    names.insert(d["name"].get<std::string>());
  }
  for (const char* want : {"template", "peak", "dfe", "testgood"}) EXPECT_TRUE(names.count(want)) << want;
  // The fixture folder comes first on the path, so its "template" impostor is loaded and
  // the shipped template.so is the duplicate: exactly one "template" is listed.
  EXPECT_EQ(std::count_if(j["detectors"].begin(), j["detectors"].end(),
                          [](const auto& d) { return d["name"] == "template"; }),
            1);
  std::set<std::string> refused;
  for (const auto& f : j["refused"]) {
    refused.insert(fs::path(f["path"].get<std::string>()).filename().string());
    EXPECT_FALSE(f["reason"].get<std::string>().empty());
    if (fs::path(f["path"].get<std::string>()).filename() == "template.so") {
      EXPECT_NE(f["reason"].get<std::string>().find("already provided by"), std::string::npos);
    }
  }
  for (const char* want : {"bad-version.so", "small-struct.so", "no-entry.so", "x.so", "missing-process.so"}) {
    EXPECT_TRUE(refused.count(want)) << want;
  }
  for (const auto& f : j["refused"]) {
    if (fs::path(f["path"].get<std::string>()).filename() == "bad-version.so") {
      EXPECT_NE(f["reason"].get<std::string>().find("version 7"), std::string::npos);
    }
  }
  const auto peak = std::find_if(j["detectors"].begin(), j["detectors"].end(),
                                 [](const auto& d) { return d["name"] == "peak"; });
  ASSERT_NE(peak, j["detectors"].end());
  EXPECT_EQ((*peak)["target"], "none");
  EXPECT_EQ((*peak)["parameters"][0]["key"], "threshold");
  EXPECT_EQ((*peak)["parameters"][0]["type"], "real");
  EXPECT_TRUE(j["search_path"].is_array());
  EXPECT_EQ(j["search_path"][0]["path"], SALVOR_TEST_PLUGIN_DIR);
}

TEST(CliPlugins, TextListingAndExitCodes) {
  const Result text = run("SALVOR_PLUGIN_PATH='" + std::string(SALVOR_TEST_PLUGIN_DIR) + "'", "plugins");
  EXPECT_EQ(text.exit_code, 0);
  EXPECT_NE(text.out.find("refused:"), std::string::npos) << text.out;
  EXPECT_NE(text.out.find("bad-version.so"), std::string::npos);
  EXPECT_NE(text.out.find("peak 1.0.0"), std::string::npos);
  const Result clean = run("SALVOR_PLUGIN_PATH=", "plugins");
  EXPECT_EQ(clean.exit_code, 0);
  EXPECT_EQ(clean.out.find("refused:"), std::string::npos) << clean.out;
  EXPECT_EQ(run("", "plugins --no-such-option").exit_code, 2);  // usage error
  EXPECT_EQ(run("", "plugins --help").exit_code, 0);
}
