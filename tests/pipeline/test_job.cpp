#include <gtest/gtest.h>

#include <filesystem>
#include <fstream>

#include "common/error.hpp"
#include "pipeline/job.hpp"

using namespace salvor::pipeline;
namespace fs = std::filesystem;

static fs::path scratch(const char* name) {
  fs::path d = fs::temp_directory_path() / name;
  fs::remove_all(d);
  fs::create_directories(d / "captures");
  return d;
}

static void write(const fs::path& p, const std::string& s) { std::ofstream(p) << s; }

static std::string expect_input_error(const std::vector<fs::path>& in) {
  try {
    make_job(in);
  } catch (const salvor::Error& e) {
    EXPECT_EQ(e.kind(), salvor::ErrorKind::input);
    return e.what();
  }
  ADD_FAILURE() << "no error";
  return "";
}

TEST(Job, ReadsManifestWithRelativePaths) {
  fs::path d = scratch("salvor_job_ok");
  write(d / "captures" / "a.wav", "x");
  write(d / "format.toml", "x");
  write(d / "manifest.json",
        R"({"salvor_manifest":1,"name":"t","format":"tf1-512","format_file":"format.toml",
            "captures":[{"path":"captures/a.wav","cylinder":2,"head":1,"revolution":0}],
            "truth":{"image":"truth/image.bin","image_sha256":"ab"}})");
  Job j = make_job({d});  // a folder with a manifest.json
  ASSERT_EQ(j.captures.size(), 1u);
  EXPECT_EQ(j.captures[0].path, d / "captures" / "a.wav");
  EXPECT_EQ(j.captures[0].cylinder.value(), 2);
  EXPECT_EQ(j.format, "tf1-512");
  EXPECT_EQ(j.format_file, d / "format.toml");
  ASSERT_TRUE(j.truth.has_value());
  fs::remove_all(d);
}

TEST(Job, ReadsTomlManifest) {
  fs::path d = scratch("salvor_job_toml");
  write(d / "captures" / "a.flac", "x");
  write(d / "m.toml", "salvor_manifest = 1\nformat = \"tf1-512\"\n[[captures]]\npath = \"captures/a.flac\"\nhead = 1\n");
  Job j = make_job({d / "m.toml"});
  ASSERT_EQ(j.captures.size(), 1u);
  EXPECT_EQ(j.captures[0].head.value(), 1);
  EXPECT_EQ(j.format, "tf1-512");
  fs::remove_all(d);
}

TEST(Job, BadInputsFailClearly) {
  fs::path d = scratch("salvor_job_bad");
  // An empty folder.
  EXPECT_NE(expect_input_error({d}).find("no manifest.json"), std::string::npos);
  // A manifest listing a capture that is not there: the message names both.
  write(d / "manifest.json", R"({"salvor_manifest":1,"captures":[{"path":"captures/gone.flac"}]})");
  std::string m = expect_input_error({d / "manifest.json"});
  EXPECT_NE(m.find("manifest.json"), std::string::npos);
  EXPECT_NE(m.find("gone.flac"), std::string::npos);
  // Not JSON.
  write(d / "manifest.json", "{\"salvor_manifest\":1, captures");
  EXPECT_NE(expect_input_error({d / "manifest.json"}).find("manifest.json"), std::string::npos);
  // A missing file.
  EXPECT_NE(expect_input_error({d / "nothing.wav"}).find("nothing.wav"), std::string::npos);
  fs::remove_all(d);
}
