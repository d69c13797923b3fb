// Bad input: each case gives salvor::Error of the documented kind, with a message that
// names the file and the problem (the table in core/load/README.md).

#include <gtest/gtest.h>
#include <sndfile.h>
#include <sys/stat.h>
#include <sys/wait.h>
#include <unistd.h>

#include <cmath>
#include <cstdio>
#include <limits>

#include "load_test_util.hpp"

using namespace salvor::load;
using namespace salvor::load::test;
using salvor::ErrorKind;

namespace {

LoadOptions raw16(double rate = 1e6) {
  LoadOptions o;
  o.sample_rate_hz = rate;
  o.sample_encoding = SampleEncoding::int16_le;
  return o;
}

void expect_input(const fs::path& p, const LoadOptions& o, const std::vector<std::string>& problem,
                  size_t chunk = 4096) {
  std::vector<std::string> needles = problem;
  needles.push_back(p.filename().string());
  expect_error([&] { read_all(p, o, chunk); }, ErrorKind::input, needles);
}

nlohmann::json sigmf_meta(const std::string& datatype) {
  return {{"global", {{"core:datatype", datatype}, {"core:sample_rate", 1e6}, {"core:version", "1.0.0"}}},
          {"captures", nlohmann::json::array({{{"core:sample_start", 0}}})}};
}

}  // namespace

TEST(LoadErrors, MissingFile) {
  ScratchDir dir;
  expect_input(dir / "nothing.wav", {}, {"does not exist"});
}

TEST(LoadErrors, EmptyFile) {
  ScratchDir dir;
  write_text(dir / "empty.wav", "");
  expect_input(dir / "empty.wav", {}, {"empty"});
  write_text(dir / "empty.raw", "");
  expect_input(dir / "empty.raw", raw16(), {"empty"});
}

TEST(LoadErrors, Directory) {
  ScratchDir dir;
  fs::create_directories(dir / "capture.wav");
  expect_input(dir / "capture.wav", {}, {"is a directory"});
}

TEST(LoadErrors, UnreadableFile) {
  ScratchDir dir;
  const fs::path p = dir / "locked.i16";
  write_bytes(p, int16_bytes(test_int16(10), true));
  ::chmod(p.c_str(), 0);
  if (::geteuid() != 0) {
    expect_input(p, raw16(), {"cannot open for reading", "Permission denied"});
    return;
  }
  // Root reads anything: check from a child that has dropped to an unprivileged user.
  int fds[2];
  ASSERT_EQ(::pipe(fds), 0);
  pid_t pid = ::fork();
  ASSERT_GE(pid, 0);
  if (pid == 0) {
    ::close(fds[0]);
    std::string report = "no error";
    if (::setgid(65534) != 0 || ::setuid(65534) != 0) {
      report = "setuid failed";
    } else {
      try {
        open_capture(p, raw16());
      } catch (const salvor::Error& e) {
        report = std::string(e.kind() == ErrorKind::input ? "input|" : "other|") + e.what();
      } catch (...) {
        report = "foreign exception";
      }
    }
    (void)!::write(fds[1], report.data(), report.size());
    ::_exit(0);
  }
  ::close(fds[1]);
  std::string report;
  char buf[512];
  ssize_t n;
  while ((n = ::read(fds[0], buf, sizeof buf)) > 0) report.append(buf, static_cast<size_t>(n));
  ::close(fds[0]);
  int status = 0;
  ::waitpid(pid, &status, 0);
  EXPECT_EQ(report.rfind("input|", 0), 0u) << report;
  EXPECT_NE(report.find("locked.i16"), std::string::npos) << report;
  EXPECT_NE(report.find("Permission denied"), std::string::npos) << report;
}

TEST(LoadErrors, TruncatedOrCorruptHeader) {
  ScratchDir dir;
  // A WAV cut after 20 bytes: libsndfile's own error string is part of the message.
  write_sndfile_short(dir / "ok.wav", SF_FORMAT_WAV | SF_FORMAT_PCM_16, 48000, 1, test_int16(100));
  auto bytes = read_bytes(dir / "ok.wav");
  write_bytes(dir / "cut.wav", std::vector<std::byte>(bytes.begin(), bytes.begin() + 20));
  std::string m = expect_error([&] { open_capture(dir / "cut.wav"); }, ErrorKind::input, {"cut.wav", "libsndfile"});
  EXPECT_GT(m.size(), std::string("cut.wav: libsndfile cannot read the header: ").size()) << m;
  // A RIFF header with a garbage fmt chunk.
  auto bad = bytes;
  for (size_t i = 12; i < 36; ++i) bad[i] = std::byte{0xEE};
  write_bytes(dir / "garbage.wav", bad);
  expect_error([&] { open_capture(dir / "garbage.wav"); }, ErrorKind::input, {"garbage.wav", "libsndfile"});
  // FLAC magic followed by nothing sensible.
  write_text(dir / "bad.flac", "fLaC\x01\x02\x03 not a flac stream at all");
  expect_error([&] { open_capture(dir / "bad.flac"); }, ErrorKind::input, {"bad.flac", "libsndfile"});
}

// A capture cut short after its header was written: libsndfile opens such WAV, W64, RF64
// and AIFF files with the smaller frame count and no error (measured with libsndfile
// 1.2.0), and FLAC stops decoding early. Each is refused with the announced length.
TEST(LoadErrors, TruncatedData) {
  ScratchDir dir;
  const auto v = test_int16(100000, 17);
  struct Snd {
    const char* name;
    int format;
  };
  for (Snd s : {Snd{"t.wav", SF_FORMAT_WAV | SF_FORMAT_PCM_16}, Snd{"t.w64", SF_FORMAT_W64 | SF_FORMAT_PCM_16},
                Snd{"t.rf64", SF_FORMAT_RF64 | SF_FORMAT_PCM_16}, Snd{"t.aiff", SF_FORMAT_AIFF | SF_FORMAT_PCM_16},
                Snd{"t.flac", SF_FORMAT_FLAC | SF_FORMAT_PCM_16}}) {
    write_sndfile_short(dir / s.name, s.format, 48000, 1, v);
    EXPECT_EQ(read_all(dir / s.name).size(), v.size()) << s.name;  // intact: reads whole
    const auto size = fs::file_size(dir / s.name);
    fs::resize_file(dir / s.name, size - 30001);
    expect_input(dir / s.name, {}, {"100000 frames"});
  }
}

// FLAC frames carry a CRC-16 (FLAC format specification, "FRAME_FOOTER"); libsndfile
// reports a damaged frame and the reader passes its message on, with the position.
TEST(LoadErrors, CorruptFlacFrame) {
  ScratchDir dir;
  write_sndfile_short(dir / "c.flac", SF_FORMAT_FLAC | SF_FORMAT_PCM_16, 48000, 1, test_int16(100000, 19));
  auto b = read_bytes(dir / "c.flac");
  for (size_t i = b.size() / 2; i < b.size() / 2 + 16; ++i) b[i] = std::byte{0x55};
  write_bytes(dir / "c.flac", b);
  expect_input(dir / "c.flac", {}, {"decoding failed after", "of 100000 frames"});
}

TEST(LoadErrors, RawLengthNotWholeSamples) {
  ScratchDir dir;
  write_bytes(dir / "odd.raw", std::vector<std::byte>(1001, std::byte{1}));
  expect_input(dir / "odd.raw", raw16(), {"length 1001 bytes", "not a whole number of int16_le samples"});
  // After a header: 1032 - 31 = 1001 bytes.
  write_bytes(dir / "hdr.raw", std::vector<std::byte>(1032, std::byte{1}));
  LoadOptions o = raw16();
  o.header_bytes = 31;
  expect_input(dir / "hdr.raw", o, {"after a header of 31 bytes", "not a whole number"});
  o.header_bytes = 2000;
  expect_input(dir / "hdr.raw", o, {"shorter than its header"});
  // zstd: the decompressed length is checked at the end of the stream.
  write_bytes(dir / "odd.i32.zst", zstd_compress(std::vector<std::byte>(1001, std::byte{1})));
  LoadOptions z;
  z.sample_rate_hz = 1e6;
  expect_input(dir / "odd.i32.zst", z, {"1001 bytes", "not a whole number of int32_le samples"});
}

TEST(LoadErrors, NonFiniteSamplesNameTheIndex) {
  ScratchDir dir;
  std::vector<float> f(5000, 0.25f);
  f[1234] = std::numeric_limits<float>::quiet_NaN();
  write_bytes(dir / "nan.f32", float32_bytes(f));
  for (size_t chunk : {size_t{1}, size_t{7}, size_t{4096}})
    expect_input(dir / "nan.f32", rate_option(1e6), {"sample 1234", "NaN"}, chunk);
  std::vector<double> d(300, 0.5);
  d[299] = std::numeric_limits<double>::infinity();
  write_sndfile_double(dir / "inf.wav", SF_FORMAT_WAV | SF_FORMAT_FLOAT, 48000, 1, d);
  expect_input(dir / "inf.wav", {}, {"sample 299", "infinite"});
  // A finite double too large for float becomes infinite after loading: refused as well.
  std::vector<double> big(10, 1.0);
  big[3] = 1e300;
  write_bytes(dir / "big.f64", float64_bytes(big));
  expect_input(dir / "big.f64", rate_option(1e6), {"sample 3", "infinite"});
  write_text(dir / "nan.csv", "t,v\n0,1\n1e-6,nan\n2e-6,1\n");
  expect_input(dir / "nan.csv", {}, {"sample 1", "NaN"});
}

TEST(LoadErrors, SampleRateOutOfBounds) {
  ScratchDir dir;
  write_bytes(dir / "r.i16", int16_bytes(test_int16(10), true));
  for (double bad : {0.0, -5.0, 500.0, 2e12}) {
    write_json(dir / "r.i16.json", {{"salvor_sidecar", 1}, {"sample_rate_hz", bad}});
    std::string m = expect_error([&] { open_capture(dir / "r.i16"); }, ErrorKind::input,
                                 {"r.i16.json", "outside the accepted range 1 kHz to 1 THz"});
  }
  // From the options: a usage error naming the option.
  for (double bad : {0.0, -1.0, std::nan(""), 1e13}) {
    LoadOptions o;
    o.sample_rate_hz = bad;
    expect_error([&] { open_capture(dir / "r.i16", o); }, ErrorKind::usage, {"sample_rate_hz", "outside the accepted range"});
  }
  // In a file header: a WAV whose rate field (bytes 24..27) says 0 Hz or 100 Hz.
  write_sndfile_short(dir / "z.wav", SF_FORMAT_WAV | SF_FORMAT_PCM_16, 48000, 1, test_int16(10));
  auto b = read_bytes(dir / "z.wav");
  b[24] = std::byte{100};
  b[25] = b[26] = b[27] = std::byte{0};
  write_bytes(dir / "z.wav", b);
  expect_input(dir / "z.wav", {}, {"file header sample rate 100 Hz", "outside the accepted range"});
  b[24] = std::byte{0};
  write_bytes(dir / "z.wav", b);
  expect_input(dir / "z.wav", {}, {"z.wav"});  // libsndfile or the bound check refuses it
}

TEST(LoadErrors, RawWithoutRateOrEncoding) {
  ScratchDir dir;
  write_bytes(dir / "n.i16", int16_bytes(test_int16(10), true));
  expect_input(dir / "n.i16", {}, {"no sample rate"});
  write_bytes(dir / "n.raw", int16_bytes(test_int16(10), true));
  expect_input(dir / "n.raw", rate_option(1e6), {"without a sample encoding"});
}

TEST(LoadErrors, CsvNonUniformSteps) {
  ScratchDir dir;
  std::string s = "time,value\n";
  for (int i = 0; i < 20; ++i) {
    char line[64];
    std::snprintf(line, sizeof line, "%.12g,0.5\n", i * 1e-6 + (i >= 12 ? 0.01e-6 : 0.0));
    s += line;
  }
  write_text(dir / "jitter.csv", s);
  // Line 1 is the header, so sample 12 is on line 14.
  expect_input(dir / "jitter.csv", {}, {"line 14", "not uniformly spaced"});
  // A looser tolerance accepts the same file (the step is off by 1 %).
  LoadOptions loose;
  loose.csv_step_tolerance = 0.02;
  EXPECT_EQ(read_all(dir / "jitter.csv", loose).size(), 20u);
  write_text(dir / "back.csv", "0,1\n1e-6,1\n2e-6,1\n1.5e-6,1\n");
  expect_input(dir / "back.csv", {}, {"line 4", "does not increase"});
}

TEST(LoadErrors, CsvNonNumericField) {
  ScratchDir dir;
  write_text(dir / "text.csv", "t,v\n0,1\n1e-6,0.5\n2e-6,abc\n3e-6,1\n");
  expect_input(dir / "text.csv", {}, {"line 4", "column 2 \"abc\" is not a number"});
  write_text(dir / "short.csv", "0,1\n1e-6,0.5\n2e-6\n");
  expect_input(dir / "short.csv", {}, {"line 3", "has no column 2"});
  write_text(dir / "words.csv", "just words\nmore words\n");
  expect_input(dir / "words.csv", {}, {"contains no samples"});
  write_text(dir / "one.csv", "0,1\n");
  expect_input(dir / "one.csv", {}, {"at least two data lines"});
}

TEST(LoadErrors, ZstdCorruptTruncatedChecksum) {
  ScratchDir dir;
  LoadOptions o = raw16();
  const auto raw = int16_bytes(test_int16(200000, 21), true);
  const auto z = zstd_compress(raw);
  write_bytes(dir / "good.zst", z);
  EXPECT_EQ(read_all(dir / "good.zst", o).size(), 200000u);
  // Truncated: the file ends inside the frame.
  write_bytes(dir / "cut.zst", std::vector<std::byte>(z.begin(), z.end() - 100));
  expect_input(dir / "cut.zst", o, {"zstd frame is truncated"});
  // Checksum: the last 4 bytes are the content checksum (RFC 8878 §3.1.1); change one.
  auto ck = z;
  ck.back() ^= std::byte{0x01};
  write_bytes(dir / "ck.zst", ck);
  expect_input(dir / "ck.zst", o, {"zstd stream is damaged", "checksum"});
  // Corrupt: overwrite a run of bytes in the middle of the compressed data.
  auto bad = z;
  for (size_t i = z.size() / 2; i < z.size() / 2 + 64; ++i) bad[i] = std::byte{0x00};
  write_bytes(dir / "bad.zst", bad);
  expect_input(dir / "bad.zst", o, {"zstd stream is damaged"});
  // Named .zst but not zstd at all.
  write_text(dir / "fake.zst", "this is not a zstd frame");
  expect_input(dir / "fake.zst", o, {"zstd stream is damaged", "Unknown frame descriptor"});
}

TEST(LoadErrors, SidecarNotJsonOrWrongTypes) {
  ScratchDir dir;
  write_bytes(dir / "s.i16", int16_bytes(test_int16(10), true));
  LoadOptions o = raw16();
  write_text(dir / "s.i16.json", "{\"salvor_sidecar\": 1, \"sample_rate_hz\": ");
  expect_error([&] { open_capture(dir / "s.i16", o); }, ErrorKind::input, {"s.i16.json", "not valid JSON"});
  struct Case {
    nlohmann::json j;
    std::string problem;
  };
  for (const Case& c : {Case{{{"salvor_sidecar", 1}, {"cylinder", "3"}}, "field cylinder must be a non-negative integer"},
                        Case{{{"salvor_sidecar", 1}, {"head", -1}}, "field head must be a non-negative integer"},
                        Case{{{"salvor_sidecar", 1}, {"sample_rate_hz", "250e6"}}, "field sample_rate_hz must be a number"},
                        Case{{{"salvor_sidecar", 1}, {"full_scale", 0}}, "field full_scale must be a positive number"},
                        Case{{{"salvor_sidecar", 1}, {"format", 5}}, "field format must be a string"},
                        Case{{{"salvor_sidecar", 1}, {"sample_encoding", "int24"}}, "\"int24\" is not one of"},
                        Case{{{"salvor_sidecar", 1}, {"synth", 3}}, "field synth must be a JSON object"},
                        Case{{{"salvor_sidecar", 2}}, "sidecar version 2 is not supported"},
                        Case{{{"sample_rate_hz", 1e6}}, "not a salvor sidecar"},
                        Case{nlohmann::json::array({1, 2}), "must be a JSON object"}}) {
    write_json(dir / "s.i16.json", c.j);
    expect_error([&] { open_capture(dir / "s.i16", o); }, ErrorKind::input, {"s.i16.json", c.problem});
  }
  // A sidecar named explicitly must exist.
  LoadOptions missing = o;
  missing.sidecar_path = dir / "none.json";
  expect_error([&] { open_capture(dir / "s.i16", missing); }, ErrorKind::input, {"none.json", "does not exist"});
}

TEST(LoadErrors, SidecarDisagreesWithFile) {
  ScratchDir dir;
  write_sndfile_short(dir / "d.wav", SF_FORMAT_WAV | SF_FORMAT_PCM_16, 48000, 2, test_int16(20));
  write_json(dir / "d.wav.json", {{"salvor_sidecar", 1}, {"sample_rate_hz", 250e6}});
  expect_error([&] { open_capture(dir / "d.wav"); }, ErrorKind::input,
               {"d.wav", "sidecar d.wav.json says 250 MHz, file header says 48 kHz"});
  // The option overrides both and settles it.
  EXPECT_EQ(open_capture(dir / "d.wav", rate_option(250e6)).info().sample_rate_hz, 250e6);
  write_json(dir / "d.wav.json", {{"salvor_sidecar", 1}, {"channel", 2}});
  expect_error([&] { open_capture(dir / "d.wav"); }, ErrorKind::input, {"d.wav", "names channel 2", "has 2 channels"});
  // CSV: a sidecar rate off by 1 % from the time column.
  write_text(dir / "c.csv", "0,1\n1e-6,1\n2e-6,1\n");
  write_json(dir / "c.csv.json", {{"salvor_sidecar", 1}, {"sample_rate_hz", 1.01e6}});
  expect_error([&] { open_capture(dir / "c.csv"); }, ErrorKind::input, {"c.csv", "1.01 MHz", "the time column gives 1 MHz"});
}

TEST(LoadErrors, ChannelOutOfRange) {
  ScratchDir dir;
  write_sndfile_short(dir / "st.flac", SF_FORMAT_FLAC | SF_FORMAT_PCM_16, 48000, 2, test_int16(20));
  expect_error([&] { open_capture(dir / "st.flac", channel_option(2)); }, ErrorKind::usage,
               {"st.flac", "channel 2 requested", "2 channels (0 to 1)"});
  expect_error([&] { open_capture(dir / "st.flac", channel_option(-1)); }, ErrorKind::usage, {"channel"});
}

TEST(LoadErrors, SigmfProblems) {
  ScratchDir dir;
  write_bytes(dir / "a.sigmf-data", int16_bytes(test_int16(10), true));
  write_json(dir / "a.sigmf-meta", sigmf_meta("ci16_le"));
  expect_input(dir / "a.sigmf-meta", {}, {"a.sigmf-meta", "\"ci16_le\" is not supported", "complex"});
  write_json(dir / "a.sigmf-meta", nlohmann::json{{"captures", nlohmann::json::array()}});
  expect_input(dir / "a.sigmf-meta", {}, {"needs a \"global\" object"});
  write_json(dir / "b.sigmf-meta", sigmf_meta("ri16_le"));
  expect_error([&] { open_capture(dir / "b.sigmf-meta"); }, ErrorKind::input, {"b.sigmf-data", "does not exist"});
  auto meta = sigmf_meta("ri16_le");
  meta["captures"][0]["core:sample_start"] = 10;
  write_json(dir / "a.sigmf-meta", meta);
  expect_input(dir / "a.sigmf-meta", {}, {"core:sample_start 10 is beyond the 10 samples"});
  meta = sigmf_meta("ri32_le");
  write_bytes(dir / "a.sigmf-data", std::vector<std::byte>(10, std::byte{0}));
  write_json(dir / "a.sigmf-meta", meta);
  expect_input(dir / "a.sigmf-data", {}, {"length 10 bytes", "not a whole number of int32_le samples"});
}

TEST(LoadErrors, UnknownContainerAndMisappliedOptions) {
  ScratchDir dir;
  write_text(dir / "mystery.dat", "0123456789");
  expect_input(dir / "mystery.dat", {}, {"cannot tell the container"});
  write_sndfile_short(dir / "w.wav", SF_FORMAT_WAV | SF_FORMAT_PCM_16, 48000, 1, test_int16(20));
  LoadOptions o;
  o.header_bytes = 44;
  expect_error([&] { open_capture(dir / "w.wav", o); }, ErrorKind::usage, {"header_bytes", "w.wav"});
  expect_error([&] { parse_container("mp3"); }, ErrorKind::usage, {"\"mp3\" is not one of"});
}

// A WAV above 4 GiB: its RIFF and data sizes are 32-bit (Microsoft RIFF), so a reader sees
// only the wrapped size with no error from libsndfile; the reader refuses such a file. A sparse file keeps the test cheap.
TEST(LoadErrors, WavAboveFourGibibytesIsRefused) {
  ScratchDir dir;
  write_sndfile_short(dir / "huge.wav", SF_FORMAT_WAV | SF_FORMAT_PCM_16, 48000, 1, test_int16(1000));
  ASSERT_EQ(::truncate((dir / "huge.wav").c_str(), static_cast<off_t>(4ull << 30) + 4096), 0);
  expect_input(dir / "huge.wav", {}, {"cannot describe more than 4 GiB", "RF64"});
}
