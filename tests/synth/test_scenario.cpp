// Scenario files: the shipped ones load, mistakes are refused naming the key; the demo
// image's ustar archive is read back by Debian's python3 tarfile module as the oracle.
#include <gtest/gtest.h>

#include <cstdio>
#include <filesystem>
#include <fstream>

#include "common/error.hpp"
#include "common/sha256.hpp"
#include "synth/scenario.hpp"
#include "synth/ustar.hpp"

using namespace salvor::synth;
namespace fs = std::filesystem;

namespace {
std::string error_of(const std::string& text) {
  try {
    parse_scenario(text, "bad.toml");
  } catch (const salvor::Error& e) {
    EXPECT_EQ(e.kind(), salvor::ErrorKind::input);
    return e.what();
  }
  ADD_FAILURE() << "accepted:\n" << text;
  return "";
}
const char* kMinimal = "[scenario]\nformat = \"tf1-512\"\n";
}  // namespace

TEST(SynthScenario, ShippedScenariosLoad) {
  for (const char* name : {"demo", "clean", "tiny", "perpendicular"}) {
    const fs::path p = find_scenario(name);
    EXPECT_EQ(p, fs::path(SALVOR_SOURCE_DIR) / "corpora/scenarios" / (std::string(name) + ".toml"));
    const Scenario s = load_scenario(p);
    EXPECT_EQ(s.name, name);
    EXPECT_EQ(s.format, "tf1-512");
    EXPECT_TRUE(s.snr_db.has_value()) << name;
  }
  const Scenario demo = load_scenario(find_scenario("demo"));
  EXPECT_EQ(demo.revolutions, 3);
  EXPECT_EQ(demo.image, "survey-archive");
  EXPECT_EQ(demo.model, PulseModel::lorentzian);
  EXPECT_GE(demo.density, 2.0);
  EXPECT_LE(demo.density, 2.5);
  EXPECT_FALSE(demo.scratches.empty());
  EXPECT_FALSE(demo.asperities.empty());
  EXPECT_FALSE(demo.weak_heads.empty());
  EXPECT_GT(demo.spindle.drift_ppm, 0);
  EXPECT_EQ(load_scenario(find_scenario("perpendicular")).model, PulseModel::erf);
  EXPECT_THROW(find_scenario("no-such-scenario"), salvor::Error);
}

TEST(SynthScenario, DefaultsAndOverrides) {
  const Scenario s = parse_scenario(std::string(kMinimal) +
                                        "[capture]\nsample_rate_hz = 3.0e8\ncontainer = \"w64\"\n"
                                        "[channel]\nmodel = \"erf\"\ndensity = 1.5\nsnr_db = 25\n",
                                    "ok.toml");
  EXPECT_EQ(s.container, Container::w64);
  EXPECT_EQ(*s.sample_rate_hz, 3.0e8);
  EXPECT_FALSE(s.samples_per_bit);
  EXPECT_EQ(s.model, PulseModel::erf);
  EXPECT_EQ(s.span_widths, 4.0);  // erf default
  EXPECT_EQ(*s.snr_db, 25.0);
  const Scenario d = parse_scenario(kMinimal, "min.toml");
  EXPECT_EQ(*d.samples_per_bit, 2.5);
  EXPECT_FALSE(d.snr_db);
}

TEST(SynthScenario, MistakesAreRefusedNamingTheKey) {
  EXPECT_NE(error_of(std::string(kMinimal) + "[channel]\nsnr = 20\n").find("channel.snr: unknown key"), std::string::npos);
  EXPECT_NE(error_of(std::string(kMinimal) + "[channel]\ndensity = 9.0\n").find("channel.density: value 9 is outside"), std::string::npos);
  EXPECT_NE(error_of("[scenario]\nname = \"x\"\n").find("scenario.format: missing"), std::string::npos);
  EXPECT_NE(error_of(std::string(kMinimal) + "[capture]\nsamples_per_bit = 2.5\nsample_rate_hz = 2e8\n").find("not both"),
            std::string::npos);
  EXPECT_NE(error_of(std::string(kMinimal) + "[[scratch]]\nhead = 0\ncylinders = [3]\n").find("scratch.cylinders"),
            std::string::npos);
  EXPECT_NE(error_of(std::string(kMinimal) + "[channel]\ndensity = \"wide\"\n").find("expected a number"), std::string::npos);
  EXPECT_NE(error_of(std::string(kMinimal) + "[channel\n").find("bad.toml"), std::string::npos);
  EXPECT_NE(error_of(std::string(kMinimal) + "[wobble]\nx = 1\n").find("wobble: unknown key"), std::string::npos);
  try {
    parse_scenario(std::string(kMinimal) + "[capture]\ncontainer = \"mp3\"\n", "bad.toml");
    ADD_FAILURE();
  } catch (const salvor::Error& e) {
    EXPECT_NE(std::string(e.what()).find("mp3"), std::string::npos);
  }
}

// POSIX ustar (IEEE Std 1003.1-2017, pax "ustar Interchange Format"): Debian's python3
// tarfile module, run as the oracle, lists the members with their sizes and checks every
// header checksum (it raises on a bad one); one member's bytes are compared too.
TEST(SynthUstar, DemoArchiveReadsBackWithPythonTarfile) {
  const auto members = demo_archive_members(20260314);
  const auto tar = build_ustar(members);
  EXPECT_EQ(tar.size() % 512, 0u);
  EXPECT_EQ(build_ustar(demo_archive_members(20260314)), tar);  // deterministic
  EXPECT_LE(tar.size(), 2u * 24 * 16 * 512);                    // fits the tf1-512 image
  const fs::path p = fs::temp_directory_path() / ("salvor-ustar-" + std::to_string(::getpid()) + ".tar");
  {
    std::ofstream o(p, std::ios::binary);
    o.write(reinterpret_cast<const char*>(tar.data()), static_cast<std::streamsize>(tar.size()));
  }
  const std::string cmd = std::string(SALVOR_ORACLE_PYTHON) +
                          " -c \"import tarfile,sys,hashlib\n"
                          "t=tarfile.open(sys.argv[1],'r:')\n"
                          "for m in t.getmembers(): print(m.name, m.size, m.mtime, m.uname, m.isfile(), "
                          "hashlib.sha256(t.extractfile(m).read()).hexdigest())\n\" " +
                          p.string();
  FILE* f = popen(cmd.c_str(), "r");
  ASSERT_NE(f, nullptr);
  std::string out;
  char buf[512];
  while (fgets(buf, sizeof buf, f)) out += buf;
  ASSERT_EQ(pclose(f), 0) << out;
  fs::remove(p);
  std::string expect;
  for (const auto& m : members) {
    expect += m.name + " " + std::to_string(m.data.size()) + " 1773446400 field True " +
              salvor::sha256_hex(std::as_bytes(std::span<const uint8_t>(m.data))) + "\n";
  }
  EXPECT_EQ(out, expect);
  EXPECT_NE(out.find("survey/sketch.pgm"), std::string::npos);
  EXPECT_NE(out.find("survey/loggers/station-a.csv"), std::string::npos);
}
