// Every container and encoding reads back sample-exact; chunking, channels, rewind,
// detection, sidecar precedence. Test captures are written here from known integers.

#include <gtest/gtest.h>
#include <sndfile.h>
#include <unistd.h>

#include <algorithm>
#include <cmath>
#include <tuple>
#include <cstdio>

#include "load_test_util.hpp"

using namespace salvor::load;
using namespace salvor::load::test;
using salvor::ErrorKind;

namespace {

constexpr int kRate = 96000;

nlohmann::json sigmf_meta(const std::string& datatype, double rate, int channels = 1) {
  nlohmann::json j;
  j["global"] = {{"core:datatype", datatype},
                 {"core:sample_rate", rate},
                 {"core:version", "1.0.0"},
                 {"core:num_channels", channels},
                 {"core:extensions", nlohmann::json::array({{{"name", "salvor"}, {"version", "1.0.0"}, {"optional", true}}})}};
  j["captures"] = nlohmann::json::array({{{"core:sample_start", 0}}});
  j["annotations"] = nlohmann::json::array();
  return j;
}

std::string csv_of(const std::vector<int16_t>& v, double step) {
  std::string s = "# invented digitizer export\nTime (s),Ch1 (V)\n";
  char line[96];
  for (size_t i = 0; i < v.size(); ++i) {
    std::snprintf(line, sizeof line, "%.17g,%.17g\n", static_cast<double>(i) * step, v[i] / 32768.0);
    s += line;
  }
  return s;
}

}  // namespace

// libsndfile's float normalisation of PCM_16 is x/32768 (libsndfile api.html, sf_read_float
// with SFC_SET_NORM_FLOAT on, the default; Debian libsndfile 1.2.0 as the oracle): -15000
// must read back as exactly -15000/32768 = -0.457763671875.
TEST(LoadFormats, Int16ScaleMatchesLibsndfile) {
  ScratchDir dir;
  std::vector<int16_t> v = {-15000, -32768, 32767};
  write_sndfile_short(dir / "a.wav", SF_FORMAT_WAV | SF_FORMAT_PCM_16, kRate, 1, v);
  auto got = read_all(dir / "a.wav");
  ASSERT_EQ(got.size(), 3u);
  EXPECT_EQ(got[0], -0.457763671875f);
  EXPECT_EQ(got[1], -1.0f);
  EXPECT_EQ(got[2], 32767.0f / 32768.0f);
}

// The same int16 values through every container give the same floats, bit for bit.
TEST(LoadFormats, SameInt16ThroughEveryContainer) {
  ScratchDir dir;
  const auto v = test_int16(5000);
  const auto want = as_float(v);
  struct Snd {
    const char* name;
    int format;
  };
  for (Snd s : {Snd{"c.wav", SF_FORMAT_WAV | SF_FORMAT_PCM_16}, Snd{"c.w64", SF_FORMAT_W64 | SF_FORMAT_PCM_16},
                Snd{"c.rf64", SF_FORMAT_RF64 | SF_FORMAT_PCM_16}, Snd{"c.flac", SF_FORMAT_FLAC | SF_FORMAT_PCM_16},
                Snd{"c.aiff", SF_FORMAT_AIFF | SF_FORMAT_PCM_16}}) {
    write_sndfile_short(dir / s.name, s.format, kRate, 1, v);
    auto r = open_capture(dir / s.name);
    EXPECT_EQ(r.info().container, Container::sndfile) << s.name;
    EXPECT_EQ(r.info().sample_rate_hz, kRate) << s.name;
    EXPECT_EQ(r.info().total_samples.value_or(0), v.size()) << s.name;
    EXPECT_EQ(read_all(r, 4096), want) << s.name;
  }
  LoadOptions raw;
  raw.sample_rate_hz = kRate;
  raw.sample_encoding = SampleEncoding::int16_le;
  write_bytes(dir / "le.raw", int16_bytes(v, true));
  EXPECT_EQ(read_all(dir / "le.raw", raw), want);
  raw.sample_encoding = SampleEncoding::int16_be;
  write_bytes(dir / "be.raw", int16_bytes(v, false));
  EXPECT_EQ(read_all(dir / "be.raw", raw), want);

  write_bytes(dir / "c.i16.zst", zstd_compress(int16_bytes(v, true)));
  write_json(dir / "c.i16.zst.json", {{"salvor_sidecar", 1}, {"sample_rate_hz", kRate}, {"sample_encoding", "int16_le"}});
  {
    auto r = open_capture(dir / "c.i16.zst");
    EXPECT_EQ(r.info().container, Container::zstd_raw);
    EXPECT_EQ(read_all(r, 4096), want);
  }
  for (bool le : {true, false}) {
    write_bytes(dir / "s.sigmf-data", int16_bytes(v, le));
    write_json(dir / "s.sigmf-meta", sigmf_meta(le ? "ri16_le" : "ri16_be", kRate));
    auto r = open_capture(dir / "s.sigmf-meta");
    EXPECT_EQ(r.info().container, Container::sigmf);
    EXPECT_EQ(r.info().sample_rate_hz, kRate);
    EXPECT_EQ(read_all(r, 4096), want) << (le ? "ri16_le" : "ri16_be");
    EXPECT_EQ(read_all(dir / "s.sigmf-data"), want);  // either file of the pair opens it
  }
  write_text(dir / "c.csv", csv_of(v, 1.0 / kRate));
  {
    auto r = open_capture(dir / "c.csv");
    EXPECT_EQ(r.info().container, Container::csv);
    EXPECT_NEAR(r.info().sample_rate_hz, kRate, kRate * 1e-9);
    EXPECT_EQ(read_all(r, 4096), want);
  }
}

// Each libsndfile subtype against the scale libsndfile documents for sf_read_float:
// integers normalised by 2^(bits-1), floats as stored (libsndfile api.html, "sf_read_float").
TEST(LoadFormats, LibsndfileSubtypesScale) {
  ScratchDir dir;
  const auto v16 = test_int16(1000, 7);
  std::vector<int32_t> i32(v16.size());
  for (size_t i = 0; i < v16.size(); ++i) i32[i] = static_cast<int32_t>(v16[i]) * 65536 + static_cast<int32_t>(i * 977 % 65536);

  // PCM_24: libsndfile's int interface keeps the top 24 bits of a 32-bit int.
  write_sndfile_int(dir / "p24.wav", SF_FORMAT_WAV | SF_FORMAT_PCM_24, kRate, 1, i32);
  write_sndfile_int(dir / "p24.flac", SF_FORMAT_FLAC | SF_FORMAT_PCM_24, kRate, 1, i32);
  write_sndfile_int(dir / "p32.wav", SF_FORMAT_WAV | SF_FORMAT_PCM_32, kRate, 1, i32);
  auto p24 = read_all(dir / "p24.wav");
  auto p24f = read_all(dir / "p24.flac");
  auto p32 = read_all(dir / "p32.wav");
  ASSERT_EQ(p24.size(), i32.size());
  ASSERT_EQ(p32.size(), i32.size());
  for (size_t i = 0; i < i32.size(); ++i) {
    EXPECT_EQ(p24[i], static_cast<float>((i32[i] >> 8) / 8388608.0)) << i;
    EXPECT_EQ(p32[i], static_cast<float>(i32[i] / 2147483648.0)) << i;
  }
  EXPECT_EQ(p24f, p24);

  std::vector<double> d(v16.size());
  for (size_t i = 0; i < d.size(); ++i) d[i] = v16[i] / 1000.0 + 1e-9 * static_cast<double>(i);  // beyond ±1 on purpose
  write_sndfile_double(dir / "f.wav", SF_FORMAT_WAV | SF_FORMAT_FLOAT, kRate, 1, d);
  write_sndfile_double(dir / "d.w64", SF_FORMAT_W64 | SF_FORMAT_DOUBLE, kRate, 1, d);
  auto f = read_all(dir / "f.wav");
  auto dd = read_all(dir / "d.w64");
  ASSERT_EQ(f.size(), d.size());
  for (size_t i = 0; i < d.size(); ++i) {
    EXPECT_EQ(f[i], static_cast<float>(d[i])) << i;
    EXPECT_EQ(dd[i], static_cast<float>(d[i])) << i;
  }
  auto r = open_capture(dir / "d.w64");
  EXPECT_EQ(r.info().sample_encoding, "double");
}

// Raw encodings agree with libsndfile reading the same stored values (libsndfile as the
// oracle): int8 vs AIFF PCM_S8, uint8 vs WAV PCM_U8, int32 vs WAV PCM_32, float32 vs WAV
// FLOAT, float64 vs W64 DOUBLE.
TEST(LoadFormats, RawEncodingsAgreeWithLibsndfile) {
  ScratchDir dir;
  // An even count: libsndfile 1.2.0's AIFF writer pads an odd-length 8-bit sound chunk and
  // counts the pad byte as a frame (777 written: COMM numSampleFrames says 778).
  const auto v16 = test_int16(778, 3);
  LoadOptions o;
  o.sample_rate_hz = kRate;

  std::vector<int32_t> as8(v16.size()), as32(v16.size());
  std::vector<std::byte> s8, u8;
  for (size_t i = 0; i < v16.size(); ++i) {
    int8_t b = static_cast<int8_t>(v16[i] >> 8);
    as8[i] = static_cast<int32_t>(b) * (1 << 24);
    s8.push_back(static_cast<std::byte>(static_cast<uint8_t>(b)));
    u8.push_back(static_cast<std::byte>(static_cast<uint8_t>(b + 128)));
    as32[i] = static_cast<int32_t>(v16[i]) * 65536 - static_cast<int32_t>(i);
  }
  write_sndfile_int(dir / "s8.aiff", SF_FORMAT_AIFF | SF_FORMAT_PCM_S8, kRate, 1, as8);
  write_sndfile_int(dir / "u8.wav", SF_FORMAT_WAV | SF_FORMAT_PCM_U8, kRate, 1, as8);
  write_sndfile_int(dir / "i32.wav", SF_FORMAT_WAV | SF_FORMAT_PCM_32, kRate, 1, as32);
  write_bytes(dir / "s8.raw", s8);
  write_bytes(dir / "u8.raw", u8);
  write_bytes(dir / "i32le.raw", int32_bytes(as32, true));
  write_bytes(dir / "i32be.raw", int32_bytes(as32, false));

  o.sample_encoding = SampleEncoding::int8;
  {
    auto a = read_all(dir / "s8.raw", o), b = read_all(dir / "s8.aiff");
    ASSERT_EQ(a.size(), b.size());
    for (size_t i = 0; i < a.size(); ++i) ASSERT_EQ(a[i], b[i]) << i << " stored " << int(static_cast<int8_t>(s8[i]));
  }
  o.sample_encoding = SampleEncoding::uint8;
  EXPECT_EQ(read_all(dir / "u8.raw", o), read_all(dir / "u8.wav"));
  o.sample_encoding = SampleEncoding::int32_le;
  EXPECT_EQ(read_all(dir / "i32le.raw", o), read_all(dir / "i32.wav"));
  o.sample_encoding = SampleEncoding::int32_be;
  EXPECT_EQ(read_all(dir / "i32be.raw", o), read_all(dir / "i32.wav"));

  std::vector<double> d(v16.size());
  std::vector<float> fl(v16.size());
  for (size_t i = 0; i < d.size(); ++i) {
    d[i] = std::sin(0.01 * static_cast<double>(i)) * 3.0 + 1e-12 * static_cast<double>(v16[i]);
    fl[i] = static_cast<float>(d[i]);
  }
  write_sndfile_double(dir / "f.wav", SF_FORMAT_WAV | SF_FORMAT_FLOAT, kRate, 1, d);
  write_sndfile_double(dir / "d.w64", SF_FORMAT_W64 | SF_FORMAT_DOUBLE, kRate, 1, d);
  write_bytes(dir / "c.f32", float32_bytes(fl));
  write_bytes(dir / "c.f64", float64_bytes(d));
  // Encodings from the file name (.f32, .f64): the lowest-precedence source.
  EXPECT_EQ(read_all(dir / "c.f32", rate_option(kRate)), read_all(dir / "f.wav"));
  EXPECT_EQ(read_all(dir / "c.f64", rate_option(kRate)), read_all(dir / "d.w64"));
}

// Chunked reads (1, 7, 4096, whole) and small internal buffers give identical output.
TEST(LoadFormats, ChunkSizesGiveIdenticalOutput) {
  ScratchDir dir;
  const auto v = test_int16(3 * 5003, 11);  // 3 channels × 5003 frames
  std::vector<int16_t> mono(v.begin(), v.begin() + 5003);
  write_sndfile_short(dir / "m.wav", SF_FORMAT_WAV | SF_FORMAT_PCM_16, kRate, 3, v);
  write_sndfile_short(dir / "m.flac", SF_FORMAT_FLAC | SF_FORMAT_PCM_16, kRate, 3, v);
  write_bytes(dir / "m.i16", int16_bytes(mono, true));
  // Two zstd frames back to back, the cut inside a sample: one stream to the reader.
  auto bytes = int16_bytes(mono, true);
  std::vector<std::byte> first(bytes.begin(), bytes.begin() + 4001), second(bytes.begin() + 4001, bytes.end());
  auto z = zstd_compress(first);
  auto z2 = zstd_compress(second, false);
  z.insert(z.end(), z2.begin(), z2.end());
  write_bytes(dir / "m.i16.zst", z);
  write_bytes(dir / "s.sigmf-data", int16_bytes(v, false));
  write_json(dir / "s.sigmf-meta", sigmf_meta("ri16_be", kRate, 3));
  write_text(dir / "m.csv", csv_of(mono, 1e-6));

  LoadOptions base;
  base.sample_rate_hz = kRate;
  for (const char* name : {"m.wav", "m.flac", "m.i16", "m.i16.zst", "s.sigmf-meta", "m.csv"}) {
    for (int ch : {0, 2}) {
      if (ch == 2 && (std::string(name) == "m.i16" || std::string(name) == "m.i16.zst" || std::string(name) == "m.csv"))
        continue;
      LoadOptions o = base;
      o.channel = ch;
      const auto whole = read_all(dir / name, o, 1 << 20);
      ASSERT_EQ(whole.size(), 5003u) << name;
      for (size_t chunk : {size_t{1}, size_t{7}, size_t{4096}})
        EXPECT_EQ(read_all(dir / name, o, chunk), whole) << name << " chunk " << chunk;
      for (size_t internal : {size_t{1}, size_t{7}}) {
        LoadOptions small = o;
        small.chunk_samples = internal;
        EXPECT_EQ(read_all(dir / name, small, 4096), whole) << name << " internal " << internal;
      }
      // The chosen channel is the right one.
      const bool interleaved = std::string(name) == "m.wav" || std::string(name) == "m.flac" ||
                               std::string(name) == "s.sigmf-meta";
      if (interleaved) {
        for (size_t i = 0; i < whole.size(); ++i)
          ASSERT_EQ(whole[i], v[i * 3 + static_cast<size_t>(ch)] / 32768.0f) << name << " " << i;
      } else {
        EXPECT_EQ(whole, as_float(mono)) << name;
      }
    }
  }
}

TEST(LoadFormats, RewindRestartsAtTheFirstSample) {
  ScratchDir dir;
  const auto v = test_int16(9000, 5);
  write_sndfile_short(dir / "r.flac", SF_FORMAT_FLAC | SF_FORMAT_PCM_16, kRate, 1, v);
  write_bytes(dir / "r.i16.zst", zstd_compress(int16_bytes(v, true)));
  write_text(dir / "r.csv", csv_of(v, 1e-6));
  for (const char* name : {"r.flac", "r.i16.zst", "r.csv"}) {
    auto r = open_capture(dir / name, rate_option(kRate));
    std::vector<float> part(3333);
    ASSERT_EQ(r.read(part), part.size());
    EXPECT_EQ(r.position(), 3333u);
    r.rewind();
    EXPECT_EQ(r.position(), 0u);
    EXPECT_EQ(read_all(r, 1000), as_float(v)) << name;
    EXPECT_EQ(r.read(part), 0u) << name;  // stays at the end
  }
}

TEST(LoadFormats, ChannelFromOptionBeatsSidecar) {
  ScratchDir dir;
  const auto v = test_int16(4 * 100, 9);
  write_sndfile_short(dir / "q.wav", SF_FORMAT_WAV | SF_FORMAT_PCM_16, kRate, 4, v);
  auto channel = [&](const std::vector<float>& got) {
    for (int ch = 0; ch < 4; ++ch) {
      bool all = true;
      for (size_t i = 0; i < got.size(); ++i) all = all && got[i] == v[i * 4 + static_cast<size_t>(ch)] / 32768.0f;
      if (all) return ch;
    }
    return -1;
  };
  EXPECT_EQ(channel(read_all(dir / "q.wav")), 0);  // default
  write_json(dir / "q.wav.json", {{"salvor_sidecar", 1}, {"channel", 3}});
  EXPECT_EQ(channel(read_all(dir / "q.wav")), 3);  // sidecar
  EXPECT_EQ(channel(read_all(dir / "q.wav", channel_option(1))), 1);  // option wins
  auto r = open_capture(dir / "q.wav");
  EXPECT_EQ(r.info().channels, 4);
  EXPECT_EQ(r.info().channel, 3);
}

TEST(LoadFormats, SidecarFieldsAndPrecedence) {
  ScratchDir dir;
  const auto v = test_int16(200, 2);
  write_bytes(dir / "c003-h1-r2.raw", int16_bytes(v, false));
  write_json(dir / "c003-h1-r2.raw.json",
             {{"salvor_sidecar", 1}, {"sample_rate_hz", 250e6}, {"bit_rate_hz", 100e6}, {"format", "tf1-512"},
              {"cylinder", 3}, {"head", 1}, {"revolution", 2}, {"sample_encoding", "int16_be"}, {"full_scale", 0.5},
              {"rig", {{"probe", "invented lab rig"}}}});
  {
    auto r = open_capture(dir / "c003-h1-r2.raw");
    const auto& i = r.info();
    EXPECT_EQ(i.sample_rate_hz, 250e6);
    EXPECT_EQ(i.sample_rate_source, "sidecar");
    EXPECT_EQ(i.bit_rate_hz.value_or(0), 100e6);
    EXPECT_EQ(i.format, "tf1-512");
    EXPECT_EQ(i.cylinder.value_or(-1), 3);
    EXPECT_EQ(i.head.value_or(-1), 1);
    EXPECT_EQ(i.revolution.value_or(-1), 2);
    EXPECT_EQ(i.full_scale, 0.5);
    EXPECT_EQ(i.sample_encoding, "int16_be");
    EXPECT_EQ(i.sidecar_path, dir / "c003-h1-r2.raw.json");
    EXPECT_EQ(i.sidecar["rig"]["probe"], "invented lab rig");
    EXPECT_EQ(read_all(r, 64), as_float(v));
  }
  {
    LoadOptions o;
    o.sample_rate_hz = 1e9;
    o.bit_rate_hz = 4e8;
    o.full_scale = 2.0;
    o.format = "other";
    o.sample_encoding = SampleEncoding::int16_le;  // overrides the sidecar: bytes read the other way
    auto r = open_capture(dir / "c003-h1-r2.raw", o);
    EXPECT_EQ(r.info().sample_rate_hz, 1e9);
    EXPECT_EQ(r.info().sample_rate_source, "option");
    EXPECT_EQ(r.info().bit_rate_hz.value_or(0), 4e8);
    EXPECT_EQ(r.info().full_scale, 2.0);
    EXPECT_EQ(r.info().format, "other");
    EXPECT_EQ(read_all(r, 64), as_float([&] {
                std::vector<int16_t> swapped(v.size());
                for (size_t k = 0; k < v.size(); ++k)
                  swapped[k] = static_cast<int16_t>(static_cast<uint16_t>((static_cast<uint16_t>(v[k]) >> 8) |
                                                                          (static_cast<uint16_t>(v[k]) << 8)));
                return swapped;
              }()));
  }
  {
    // An explicit sidecar path, and use_sidecar = false.
    write_json(dir / "elsewhere.json", {{"salvor_sidecar", 1}, {"sample_rate_hz", 5e6}, {"sample_encoding", "int16_be"}});
    auto r = open_capture(dir / "c003-h1-r2.raw", sidecar_option(dir / "elsewhere.json"));
    EXPECT_EQ(r.info().sample_rate_hz, 5e6);
    LoadOptions none;
    none.use_sidecar = false;
    none.sample_rate_hz = 2e6;
    none.sample_encoding = SampleEncoding::int16_be;
    auto r2 = open_capture(dir / "c003-h1-r2.raw", none);
    EXPECT_TRUE(r2.info().sidecar.is_null());
    EXPECT_FALSE(r2.info().cylinder.has_value());
  }
}

// libsndfile keeps the rate in an int; the sidecar carries rates the header cannot hold.
TEST(LoadFormats, SidecarRateWinsWhenTheHeaderCannotHoldIt) {
  ScratchDir dir;
  const auto v = test_int16(300, 4);
  // FLAC tops out at 655350 Hz in this libsndfile (measured: 655351 is refused).
  write_sndfile_short(dir / "a.flac", SF_FORMAT_FLAC | SF_FORMAT_PCM_16, 96000, 1, v);
  write_json(dir / "a.flac.json", {{"salvor_sidecar", 1}, {"sample_rate_hz", 250e6}});
  EXPECT_EQ(open_capture(dir / "a.flac").info().sample_rate_hz, 250e6);
  // WAV holds up to 2^31-1 Hz; 3 GHz cannot be there.
  write_sndfile_short(dir / "b.wav", SF_FORMAT_WAV | SF_FORMAT_PCM_16, 48000, 1, v);
  write_json(dir / "b.wav.json", {{"salvor_sidecar", 1}, {"sample_rate_hz", 3e9}});
  EXPECT_EQ(open_capture(dir / "b.wav").info().sample_rate_hz, 3e9);
  // A rate the header could hold must agree with it.
  write_sndfile_short(dir / "c.wav", SF_FORMAT_WAV | SF_FORMAT_PCM_16, 250000000, 1, v);
  write_json(dir / "c.wav.json", {{"salvor_sidecar", 1}, {"sample_rate_hz", 250e6}});
  auto r = open_capture(dir / "c.wav");
  EXPECT_EQ(r.info().sample_rate_hz, 250e6);
  EXPECT_EQ(r.info().sample_rate_source, "sidecar");
  EXPECT_EQ(read_all(r, 100), as_float(v));
}

TEST(LoadFormats, MagicBeatsNameAndForcingWorks) {
  ScratchDir dir;
  const auto v = test_int16(100, 6);
  write_sndfile_short(dir / "looks-raw.raw", SF_FORMAT_W64 | SF_FORMAT_PCM_16, kRate, 1, v);
  EXPECT_EQ(detect_container(dir / "looks-raw.raw"), Container::sndfile);
  EXPECT_EQ(read_all(dir / "looks-raw.raw"), as_float(v));
  write_bytes(dir / "zz.dat", zstd_compress(int16_bytes(v, true)));
  EXPECT_EQ(detect_container(dir / "zz.dat"), Container::zstd_raw);
  write_bytes(dir / "plain.dat", int16_bytes(v, true));
  EXPECT_EQ(detect_container(dir / "plain.dat"), std::nullopt);
  LoadOptions forced;
  forced.container = Container::raw;
  forced.sample_rate_hz = kRate;
  forced.sample_encoding = SampleEncoding::int16_le;
  EXPECT_EQ(read_all(dir / "plain.dat", forced), as_float(v));
  EXPECT_EQ(parse_container("zstd"), Container::zstd_raw);
  EXPECT_EQ(container_name(parse_container("sigmf")), "sigmf");
}

TEST(LoadFormats, RawHeaderOffsetIsSkipped) {
  ScratchDir dir;
  const auto v = test_int16(500, 8);
  auto bytes = int16_bytes(v, true);
  auto with_header = concat(std::vector<std::byte>(32, std::byte{0xAB}), bytes);
  write_bytes(dir / "h.i16", with_header);
  LoadOptions o;
  o.sample_rate_hz = kRate;
  o.header_bytes = 32;
  auto r = open_capture(dir / "h.i16", o);
  EXPECT_EQ(r.info().total_samples.value_or(0), 500u);  // not (file size)/2 = 516
  EXPECT_EQ(read_all(r, 77), as_float(v));
  // The same header inside a zstd stream.
  write_bytes(dir / "h.i16.zst", zstd_compress(with_header));
  EXPECT_EQ(read_all(dir / "h.i16.zst", o, 77), as_float(v));
}

TEST(LoadFormats, ZstdSkippableFrameIsIgnored) {
  ScratchDir dir;
  const auto v = test_int16(1000, 12);
  // Skippable frame (RFC 8878 §3.1.2): magic 0x184D2A5?, 4-byte little-endian size, payload.
  std::vector<std::byte> z = {std::byte{0x5A}, std::byte{0x2A}, std::byte{0x4D}, std::byte{0x18},
                              std::byte{3},    std::byte{0},    std::byte{0},    std::byte{0},
                              std::byte{'i'},  std::byte{'d'},  std::byte{'x'}};
  auto frame = zstd_compress(int16_bytes(v, true));
  z.insert(z.end(), frame.begin(), frame.end());
  write_bytes(dir / "k.bin", z);
  EXPECT_EQ(detect_container(dir / "k.bin"), Container::zstd_raw);
  LoadOptions o;
  o.sample_rate_hz = kRate;
  o.sample_encoding = SampleEncoding::int16_le;
  EXPECT_EQ(read_all(dir / "k.bin", o), as_float(v));
}

TEST(LoadFormats, SigmfSampleStartHeaderAndTrailingBytes) {
  ScratchDir dir;
  const auto v = test_int16(2 * 400, 13);  // 2 channels
  auto bytes = int16_bytes(v, true);
  auto data = concat(concat(std::vector<std::byte>(16, std::byte{0x11}), bytes), std::vector<std::byte>(6, std::byte{0x22}));
  write_bytes(dir / "t.sigmf-data", data);
  auto meta = sigmf_meta("ri16_le", 2e8, 2);
  meta["global"]["core:trailing_bytes"] = 6;
  meta["global"]["salvor:channel"] = 1;
  meta["global"]["salvor:cylinder"] = 7;
  meta["global"]["salvor:head"] = 0;
  meta["global"]["salvor:revolution"] = 1;
  meta["global"]["salvor:format"] = "tf1-512";
  meta["global"]["salvor:bit_rate_hz"] = 1e8;
  meta["captures"][0]["core:sample_start"] = 10;
  meta["captures"][0]["core:header_bytes"] = 16;
  write_json(dir / "t.sigmf-meta", meta);
  auto r = open_capture(dir / "t.sigmf-meta");
  const auto& i = r.info();
  EXPECT_EQ(i.channels, 2);
  EXPECT_EQ(i.channel, 1);
  EXPECT_EQ(i.sample_rate_hz, 2e8);
  EXPECT_EQ(i.sample_rate_source, "sigmf");
  EXPECT_EQ(i.total_samples.value_or(0), 390u);
  EXPECT_EQ(i.cylinder.value_or(-1), 7);
  EXPECT_EQ(i.format, "tf1-512");
  EXPECT_EQ(i.bit_rate_hz.value_or(0), 1e8);
  EXPECT_EQ(i.sidecar_path, dir / "t.sigmf-meta");
  EXPECT_EQ(i.data_path, dir / "t.sigmf-data");
  auto got = read_all(r, 50);
  ASSERT_EQ(got.size(), 390u);
  for (size_t k = 0; k < got.size(); ++k) EXPECT_EQ(got[k], v[(k + 10) * 2 + 1] / 32768.0f) << k;
}

TEST(LoadFormats, CsvLayouts) {
  ScratchDir dir;
  // Semicolons, quotes, comments between data lines, CRLF, a third column chosen by option.
  std::string s = "\"Time\";\"A\";\"B\"\r\n";
  const double step = 2e-9;  // 500 MHz
  for (int i = 0; i < 50; ++i) {
    char line[128];
    std::snprintf(line, sizeof line, "%.12e; %d ; \"%d\"\r\n", -1e-7 + i * step, i, -i * 2);
    s += line;
    if (i == 20) s += "# trigger\r\n\r\n";
  }
  write_text(dir / "scope.csv", s);
  LoadOptions o;
  o.csv_value_column = 2;
  auto r = open_capture(dir / "scope.csv", o);
  EXPECT_NEAR(r.info().sample_rate_hz, 500e6, 500e6 * 1e-9);
  EXPECT_EQ(r.info().sample_rate_source, "csv time column");
  EXPECT_EQ(r.info().total_samples.value_or(0), 50u);
  auto got = read_all(r, 7);
  ASSERT_EQ(got.size(), 50u);
  for (int i = 0; i < 50; ++i) EXPECT_EQ(got[i], static_cast<float>(-i * 2));
  // Blank-separated, no time column: the rate must be given.
  write_text(dir / "vals.csv", "0.5  0.25\n-0.5 0.125\n1 2\n");
  LoadOptions nt;
  nt.csv_time_column = -1;
  nt.csv_value_column = 0;
  nt.sample_rate_hz = 1e6;
  EXPECT_EQ(read_all(dir / "vals.csv", nt), (std::vector<float>{0.5f, -0.5f, 1.0f}));
  // A sidecar rate agreeing with the time column (within the tolerance) is accepted.
  write_json(dir / "scope.csv.json", {{"salvor_sidecar", 1}, {"sample_rate_hz", 500e6 * (1 + 1e-5)}});
  EXPECT_EQ(open_capture(dir / "scope.csv", o).info().sample_rate_hz, 500e6 * (1 + 1e-5));
}

// A capture above 4 GiB streams with 64-bit counts (a sparse file: no disk is used).
TEST(LoadFormats, RawAboveFourGibibytesCountsSamples) {
  ScratchDir dir;
  const uint64_t size = (5ull << 30) + 6;  // 5 GiB + 3 samples
  {
    std::FILE* f = std::fopen((dir / "big.i16").c_str(), "wb");
    ASSERT_NE(f, nullptr);
    ASSERT_EQ(::ftruncate(::fileno(f), static_cast<off_t>(size)), 0);
    std::fclose(f);
  }
  auto r = open_capture(dir / "big.i16", rate_option(1e9));
  EXPECT_EQ(r.info().total_samples.value_or(0), size / 2);
  std::vector<float> buf(1000);
  EXPECT_EQ(r.read(buf), 1000u);
  EXPECT_EQ(buf[999], 0.0f);
}

TEST(LoadFormats, DescribeNamesTheEssentials) {
  ScratchDir dir;
  write_sndfile_short(dir / "d.wav", SF_FORMAT_WAV | SF_FORMAT_PCM_16, kRate, 2, test_int16(20));
  write_json(dir / "d.wav.json", {{"salvor_sidecar", 1}, {"format", "tf1-512"}, {"cylinder", 3}, {"head", 1}});
  auto r = open_capture(dir / "d.wav");
  std::string d = r.describe();
  for (const char* s : {"d.wav", "sndfile", "pcm_16", "96 kHz", "channel 0 of 2", "tf1-512", "cylinder 3"})
    EXPECT_NE(d.find(s), std::string::npos) << s << " not in " << d;
}

// Inputs are only read: after opening and reading every kind of capture, the folder holds
// exactly the same files with the same sizes and modification times.
TEST(LoadFormats, NothingIsWrittenBesideInputs) {
  ScratchDir dir;
  const auto v = test_int16(2000, 23);
  write_sndfile_short(dir / "a.flac", SF_FORMAT_FLAC | SF_FORMAT_PCM_16, kRate, 1, v);
  write_json(dir / "a.flac.json", {{"salvor_sidecar", 1}, {"sample_rate_hz", 250e6}});
  write_bytes(dir / "b.i16.zst", zstd_compress(int16_bytes(v, true)));
  write_bytes(dir / "c.sigmf-data", int16_bytes(v, true));
  write_json(dir / "c.sigmf-meta", {{"global", {{"core:datatype", "ri16_le"}, {"core:sample_rate", 1e6}}}});
  write_text(dir / "d.csv", "0,1\n1e-6,2\n2e-6,3\n");
  auto snapshot = [&] {
    std::vector<std::tuple<std::string, uintmax_t, fs::file_time_type>> s;
    for (const auto& e : fs::directory_iterator(dir.path()))
      s.emplace_back(e.path().filename().string(), e.file_size(), e.last_write_time());
    std::sort(s.begin(), s.end());
    return s;
  };
  const auto before = snapshot();
  for (const char* name : {"a.flac", "b.i16.zst", "c.sigmf-meta", "d.csv"}) {
    auto r = open_capture(dir / name, std::string(name) == "b.i16.zst" ? rate_option(1e6) : LoadOptions{});
    read_all(r, 333);
    r.rewind();
    read_all(r, 4096);
  }
  EXPECT_EQ(snapshot(), before);
}

// Compressed libsndfile subtypes decode through libsndfile; the header length check (data
// bytes / block align) does not apply to them: an IMA ADPCM block holds many frames.
TEST(LoadFormats, AdpcmWavReadsItsFullLength) {
  ScratchDir dir;
  const auto v = test_int16(10000, 29);
  write_sndfile_short(dir / "a.wav", SF_FORMAT_WAV | SF_FORMAT_IMA_ADPCM, kRate, 1, v);
  auto r = open_capture(dir / "a.wav");
  EXPECT_EQ(r.info().sample_encoding, "ima adpcm");
  const auto got = read_all(r, 4096);
  ASSERT_TRUE(r.info().total_samples.has_value());
  EXPECT_EQ(got.size(), *r.info().total_samples);
  EXPECT_GE(got.size(), v.size());  // whole ADPCM blocks: at least what was written
}
