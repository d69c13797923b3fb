// Capture writers: every container and sample format round-trips sample-exactly through an
// independent reader (libsndfile for its containers, plain byte reads for SigMF, libzstd's
// streaming decompressor for zstd), sidecars carry the DEVELOPERS.md fields.
#include <gtest/gtest.h>

#include <cstring>
#include <filesystem>
#include <fstream>
#include <sndfile.h>
#include <zstd.h>

#include "common/error.hpp"
#include "synth/digitizer.hpp"
#include "synth/rng.hpp"
#include "synth/writers.hpp"

using namespace salvor::synth;
namespace fs = std::filesystem;

namespace {

fs::path fresh_dir(const std::string& name) {
  fs::path d = fs::temp_directory_path() / ("salvor-synth-test-" + name + "-" + std::to_string(::getpid()));
  fs::remove_all(d);
  fs::create_directories(d);
  return d;
}

std::vector<uint8_t> read_bytes(const fs::path& p) {
  std::ifstream in(p, std::ios::binary);
  return {std::istreambuf_iterator<char>(in), std::istreambuf_iterator<char>()};
}

// Grid samples from the digitizer: Gaussian analog values, some of them clipping.
std::vector<float> digitized(SampleFormat f, size_t n) {
  RandomStream r(5);
  std::vector<double> analog(n);
  for (auto& v : analog) v = 0.9 * r.gaussian();
  Digitizer d({f, 2.0});
  std::vector<float> out(n);
  EXPECT_GT(d.process(analog, out), 0u);  // some clipped
  return out;
}

std::vector<int32_t> codes(const std::vector<float>& v, SampleFormat f) {
  std::vector<int32_t> c;
  for (float x : v) c.push_back(code_of(x, f));
  return c;
}

CaptureMeta meta() {
  CaptureMeta m;
  m.sample_rate_hz = 250e6;
  m.bit_rate_hz = 100.015e6;
  m.format = "tf1-512";
  m.cylinder = 3;
  m.head = 1;
  m.revolution = 2;
  m.full_scale = 2.0;
  m.synth = {{"model", "lorentzian"}};
  return m;
}

void write_chunked(CaptureWriter& w, const std::vector<float>& s) {
  size_t pos = 0, step = 1;
  while (pos < s.size()) {  // uneven chunks: 1, 8, 57, ...
    const size_t n = std::min(step, s.size() - pos);
    w.write(std::span<const float>(s.data() + pos, n));
    pos += n;
    step = step * 7 + 1;
  }
}

}  // namespace

TEST(SynthWriters, DigitizerGridAndClipping) {
  Digitizer d({SampleFormat::int16, 2.0});
  const std::vector<double> a = {0.0, 1.0, -2.0, 2.0, 5.0, -7.0, 2.0 * 1000.4 / 32768};
  std::vector<float> o(a.size());
  EXPECT_EQ(d.process(a, o), 3u);  // 2.0 (= +full scale) and the two beyond clip
  EXPECT_EQ(code_of(o[0], SampleFormat::int16), 0);
  EXPECT_EQ(code_of(o[1], SampleFormat::int16), 16384);
  EXPECT_EQ(code_of(o[2], SampleFormat::int16), -32768);
  EXPECT_EQ(code_of(o[3], SampleFormat::int16), 32767);
  EXPECT_EQ(code_of(o[5], SampleFormat::int16), -32768);
  EXPECT_EQ(code_of(o[6], SampleFormat::int16), 1000);
  Digitizer d8({SampleFormat::int8, 1.0});
  const std::vector<double> b = {0.5, -1.5, 0.99};
  std::vector<float> o8(3);
  d8.process(b, o8);
  EXPECT_EQ(code_of(o8[0], SampleFormat::int8), 64);
  EXPECT_EQ(code_of(o8[1], SampleFormat::int8), -128);
  EXPECT_EQ(code_of(o8[2], SampleFormat::int8), 127);
}

TEST(SynthWriters, SndfileContainersRoundTrip) {
  const fs::path dir = fresh_dir("sndfile");
  struct Case { Container c; SampleFormat f; };
  const Case cases[] = {{Container::wav, SampleFormat::int16},  {Container::wav, SampleFormat::float32},
                        {Container::rf64, SampleFormat::int16}, {Container::rf64, SampleFormat::float32},
                        {Container::w64, SampleFormat::int16},  {Container::w64, SampleFormat::float32},
                        {Container::flac, SampleFormat::int16}, {Container::flac, SampleFormat::int8}};
  for (const Case& k : cases) {
    const std::string stem = "c003-h1-r2-" + to_string(k.c) + "-" + to_string(k.f);
    const auto s = digitized(k.f, 20011);
    auto w = open_capture_writer(k.c, k.f, dir, stem, s.size(), 250e6);
    write_chunked(*w, s);
    w->finish(meta());
    SF_INFO info{};
    SNDFILE* f = sf_open(w->data_path().c_str(), SFM_READ, &info);
    ASSERT_NE(f, nullptr) << w->data_path() << ": " << sf_strerror(nullptr);
    ASSERT_EQ(info.frames, static_cast<sf_count_t>(s.size()));
    EXPECT_EQ(info.channels, 1);
    if (k.f == SampleFormat::float32) {
      std::vector<float> back(s.size());
      ASSERT_EQ(sf_read_float(f, back.data(), info.frames), info.frames);
      EXPECT_EQ(back, s) << stem;
    } else {
      std::vector<short> back(s.size());
      ASSERT_EQ(sf_read_short(f, back.data(), info.frames), info.frames);
      const auto want = codes(s, k.f);
      const int shift = k.f == SampleFormat::int8 ? 8 : 0;  // libsndfile reads S8 as code << 8
      for (size_t i = 0; i < s.size(); ++i) ASSERT_EQ(back[i], want[i] * (1 << shift)) << stem << " @" << i;
    }
    sf_close(f);
    // FLAC's rate field stops at 655350 Hz: the container holds 250 kHz, the sidecar the truth.
    EXPECT_EQ(info.samplerate, k.c == Container::flac ? 250000 : 250000000);
    const auto j = nlohmann::json::parse(read_bytes(w->meta_path()));
    EXPECT_EQ(j["salvor_sidecar"], 1);
    EXPECT_EQ(j["sample_rate_hz"], 250e6);
    EXPECT_EQ(j["bit_rate_hz"], 100.015e6);
    EXPECT_EQ(j["cylinder"], 3);
    EXPECT_EQ(j["head"], 1);
    EXPECT_EQ(j["revolution"], 2);
    EXPECT_EQ(j["format"], "tf1-512");
    EXPECT_EQ(j["full_scale"], 2.0);
    EXPECT_EQ(j["channel"], 0);
    EXPECT_FALSE(j.contains("sample_encoding"));
    EXPECT_EQ(j["synth"]["container_sample_rate_hz"], static_cast<double>(info.samplerate));
  }
  for (const auto& e : fs::directory_iterator(dir))
    EXPECT_EQ(e.path().string().find(".tmp-"), std::string::npos) << "left over: " << e.path();
  fs::remove_all(dir);
}

TEST(SynthWriters, SigmfAndZstdRoundTrip) {
  const fs::path dir = fresh_dir("raw");
  for (Container c : {Container::sigmf, Container::zstd}) {
    for (SampleFormat f : {SampleFormat::int8, SampleFormat::int16, SampleFormat::float32}) {
      const std::string stem = "cap-" + to_string(c) + "-" + to_string(f);
      const auto s = digitized(f, 300007);  // > one zstd input block
      auto w = open_capture_writer(c, f, dir, stem, s.size(), 250e6);
      write_chunked(*w, s);
      w->finish(meta());
      std::vector<uint8_t> raw = read_bytes(w->data_path());
      if (c == Container::zstd) {
        // The frame carries a content checksum (frame header descriptor, RFC 8878 sec. 3.1.1.1.1).
        // Magic 28 B5 2F FD, then the Frame_Header_Descriptor whose bit 2 is the checksum flag.
        ASSERT_GT(raw.size(), 5u);
        EXPECT_EQ(raw[0], 0x28);
        EXPECT_EQ(raw[1], 0xB5);
        EXPECT_EQ(raw[2], 0x2F);
        EXPECT_EQ(raw[3], 0xFD);
        EXPECT_EQ((raw[4] >> 2) & 1, 1);
        ZSTD_DCtx* d = ZSTD_createDCtx();
        std::vector<uint8_t> plain;
        std::vector<uint8_t> buf(ZSTD_DStreamOutSize());
        ZSTD_inBuffer in{raw.data(), raw.size(), 0};
        size_t ret = 1;
        while (in.pos < in.size) {
          ZSTD_outBuffer out{buf.data(), buf.size(), 0};
          ret = ZSTD_decompressStream(d, &out, &in);
          ASSERT_FALSE(ZSTD_isError(ret)) << ZSTD_getErrorName(ret);
          plain.insert(plain.end(), buf.begin(), buf.begin() + static_cast<long>(out.pos));
        }
        EXPECT_EQ(ret, 0u);  // frame complete, checksum verified
        ZSTD_freeDCtx(d);
        raw = plain;
      }
      ASSERT_EQ(raw.size(), s.size() * static_cast<size_t>(bytes_per_sample(f))) << stem;
      for (size_t i = 0; i < s.size(); ++i) {
        if (f == SampleFormat::int8) {
          ASSERT_EQ(static_cast<int8_t>(raw[i]), code_of(s[i], f)) << stem << " @" << i;
        } else if (f == SampleFormat::int16) {
          const int16_t v = static_cast<int16_t>(raw[2 * i] | (raw[2 * i + 1] << 8));  // little-endian
          ASSERT_EQ(v, code_of(s[i], f)) << stem << " @" << i;
        } else {
          const uint32_t u = raw[4 * i] | (raw[4 * i + 1] << 8) | (raw[4 * i + 2] << 16) | (uint32_t(raw[4 * i + 3]) << 24);
          float v;
          std::memcpy(&v, &u, 4);
          ASSERT_EQ(v, s[i]) << stem << " @" << i;
        }
      }
      const auto j = nlohmann::json::parse(read_bytes(w->meta_path()));
      if (c == Container::sigmf) {
        // SigMF core namespace: datatype, sample_rate, version; salvor fields in its namespace.
        const auto& g = j["global"];
        EXPECT_EQ(g["core:datatype"], f == SampleFormat::int8 ? "ri8" : f == SampleFormat::int16 ? "ri16_le" : "rf32_le");
        EXPECT_EQ(g["core:sample_rate"], 250e6);
        EXPECT_EQ(g["core:version"], "1.0.0");
        EXPECT_EQ(g["core:extensions"][0]["name"], "salvor");
        EXPECT_EQ(g["salvor:cylinder"], 3);
        EXPECT_EQ(g["salvor:bit_rate_hz"], 100.015e6);
        EXPECT_EQ(w->meta_path().extension(), ".sigmf-meta");
        EXPECT_EQ(w->data_path().extension(), ".sigmf-data");
      } else {
        EXPECT_EQ(j["sample_encoding"], sample_encoding_name(f));
        EXPECT_EQ(j["sample_rate_hz"], 250e6);
      }
    }
  }
  fs::remove_all(dir);
}

// WAV's RIFF sizes are 32-bit: libsndfile reports success on a > 4 GiB WAV and the file
// reads back truncated (coding-and-formats.md sec. 7.1, tested with libsndfile 1.2.0), so the
// writer refuses it before writing anything; RF64 and W64 take the same length.
TEST(SynthWriters, RefusesWavAbove4GiBAndUnsupportedSampleFormats) {
  const uint64_t frames = 2'300'000'000ull;  // 4.6 GB of int16
  try {
    check_container(Container::wav, SampleFormat::int16, frames, "x.wav");
    ADD_FAILURE() << "wav above 4 GiB accepted";
  } catch (const salvor::Error& e) {
    EXPECT_EQ(e.kind(), salvor::ErrorKind::usage);
    EXPECT_NE(std::string(e.what()).find("4 GiB"), std::string::npos) << e.what();
  }
  EXPECT_NO_THROW(check_container(Container::rf64, SampleFormat::int16, frames, "x.rf64"));
  EXPECT_NO_THROW(check_container(Container::w64, SampleFormat::int16, frames, "x.w64"));
  EXPECT_NO_THROW(check_container(Container::wav, SampleFormat::int16, 2'000'000'000ull, "x.wav"));
  EXPECT_THROW(check_container(Container::wav, SampleFormat::int8, 10, "x.wav"), salvor::Error);
  EXPECT_THROW(check_container(Container::flac, SampleFormat::float32, 10, "x.flac"), salvor::Error);
  EXPECT_THROW(container_from_string("mp3", "--container"), salvor::Error);
  // The refusal happens before a file exists.
  const fs::path dir = fresh_dir("refuse");
  EXPECT_THROW(open_capture_writer(Container::wav, SampleFormat::int16, dir, "big", frames, 250e6), salvor::Error);
  EXPECT_TRUE(fs::is_empty(dir));
  // A writer dropped before finish() leaves nothing behind.
  {
    auto w = open_capture_writer(Container::flac, SampleFormat::int16, dir, "dropped", 100, 250e6);
    std::vector<float> z(100, 0.0f);
    w->write(z);
  }
  {
    auto w = open_capture_writer(Container::zstd, SampleFormat::int16, dir, "dropped2", 100, 250e6);
  }
  EXPECT_TRUE(fs::is_empty(dir));
  fs::remove_all(dir);
}
