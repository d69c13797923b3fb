#include "load_test_util.hpp"

#include <gtest/gtest.h>
#include <sndfile.h>
#include <unistd.h>
#include <zstd.h>

#include <cstdio>
#include <bit>
#include <fstream>
#include <random>

namespace salvor::load::test {

ScratchDir::ScratchDir() {
  std::random_device entropy;  // unique names even when tests of several processes run at once
  const auto* info = ::testing::UnitTest::GetInstance()->current_test_info();
  std::string name = info ? std::string(info->test_suite_name()) + "." + info->name() : "load";
  dir_ = fs::temp_directory_path() /
         ("salvor-load-" + name + "-" + std::to_string(::getpid()) + "-" + std::to_string(entropy()));
  fs::remove_all(dir_);
  fs::create_directories(dir_);
}

ScratchDir::~ScratchDir() {
  std::error_code ec;
  fs::permissions(dir_, fs::perms::owner_all, fs::perm_options::add, ec);
  fs::remove_all(dir_, ec);
}

std::vector<int16_t> test_int16(size_t n, uint32_t seed) {
  std::mt19937 rng(seed);
  std::uniform_int_distribution<int> d(-32768, 32767);
  std::vector<int16_t> v(n);
  for (size_t i = 0; i < n; ++i) v[i] = static_cast<int16_t>(d(rng));
  const int16_t specials[] = {-32768, 32767, 0, -1, 1, -15000};
  for (size_t i = 0; i < std::size(specials) && i < n; ++i) v[i] = specials[i];
  return v;
}

std::vector<std::byte> concat(std::vector<std::byte> a, const std::vector<std::byte>& b) {
  a.insert(a.end(), b.begin(), b.end());
  return a;
}

void write_bytes(const fs::path& p, const std::vector<std::byte>& bytes) {
  std::ofstream f(p, std::ios::binary | std::ios::trunc);
  f.write(reinterpret_cast<const char*>(bytes.data()), static_cast<std::streamsize>(bytes.size()));
  ASSERT_TRUE(f.good()) << p;
}

void write_text(const fs::path& p, const std::string& text) {
  std::ofstream f(p, std::ios::binary | std::ios::trunc);
  f << text;
  ASSERT_TRUE(f.good()) << p;
}

std::vector<std::byte> read_bytes(const fs::path& p) {
  std::ifstream f(p, std::ios::binary);
  std::vector<char> c((std::istreambuf_iterator<char>(f)), std::istreambuf_iterator<char>());
  std::vector<std::byte> b(c.size());
  std::memcpy(b.data(), c.data(), c.size());
  return b;
}

void write_json(const fs::path& p, const nlohmann::json& j) { write_text(p, j.dump(2)); }

namespace {
SNDFILE* open_for_write(const fs::path& p, int format, int rate, int channels) {
  SF_INFO info{};
  info.samplerate = rate;
  info.channels = channels;
  info.format = format;
  SNDFILE* f = sf_open(p.c_str(), SFM_WRITE, &info);
  EXPECT_NE(f, nullptr) << p << ": " << sf_strerror(nullptr);
  return f;
}
}  // namespace

void write_sndfile_short(const fs::path& p, int format, int rate, int channels, const std::vector<int16_t>& frames) {
  SNDFILE* f = open_for_write(p, format, rate, channels);
  ASSERT_NE(f, nullptr);
  sf_count_t n = static_cast<sf_count_t>(frames.size() / static_cast<size_t>(channels));
  EXPECT_EQ(sf_writef_short(f, frames.data(), n), n);
  EXPECT_EQ(sf_close(f), 0);
}

void write_sndfile_int(const fs::path& p, int format, int rate, int channels, const std::vector<int32_t>& frames) {
  SNDFILE* f = open_for_write(p, format, rate, channels);
  ASSERT_NE(f, nullptr);
  sf_count_t n = static_cast<sf_count_t>(frames.size() / static_cast<size_t>(channels));
  EXPECT_EQ(sf_writef_int(f, frames.data(), n), n);
  EXPECT_EQ(sf_close(f), 0);
}

void write_sndfile_double(const fs::path& p, int format, int rate, int channels, const std::vector<double>& frames) {
  SNDFILE* f = open_for_write(p, format, rate, channels);
  ASSERT_NE(f, nullptr);
  // No clipping or normalisation on the way in: store the values as given.
  sf_command(f, SFC_SET_NORM_DOUBLE, nullptr, SF_FALSE);
  sf_count_t n = static_cast<sf_count_t>(frames.size() / static_cast<size_t>(channels));
  EXPECT_EQ(sf_writef_double(f, frames.data(), n), n);
  EXPECT_EQ(sf_close(f), 0);
}

namespace {
template <typename U>
void put(std::vector<std::byte>& out, U v, size_t bytes, bool little_endian) {
  for (size_t i = 0; i < bytes; ++i) {
    size_t shift = 8 * (little_endian ? i : bytes - 1 - i);
    out.push_back(static_cast<std::byte>((static_cast<uint64_t>(v) >> shift) & 0xFF));
  }
}
}  // namespace

std::vector<std::byte> int16_bytes(const std::vector<int16_t>& v, bool le) {
  std::vector<std::byte> b;
  for (int16_t x : v) put(b, static_cast<uint16_t>(x), 2, le);
  return b;
}
std::vector<std::byte> int32_bytes(const std::vector<int32_t>& v, bool le) {
  std::vector<std::byte> b;
  for (int32_t x : v) put(b, static_cast<uint32_t>(x), 4, le);
  return b;
}
std::vector<std::byte> float32_bytes(const std::vector<float>& v) {
  std::vector<std::byte> b;
  for (float x : v) put(b, std::bit_cast<uint32_t>(x), 4, true);
  return b;
}
std::vector<std::byte> float64_bytes(const std::vector<double>& v) {
  std::vector<std::byte> b;
  for (double x : v) put(b, std::bit_cast<uint64_t>(x), 8, true);
  return b;
}

std::vector<std::byte> zstd_compress(const std::vector<std::byte>& raw, bool checksum) {
  // Streaming compression as in zstd.h (libzstd 1.5.4): ZSTD_compressStream2 until ZSTD_e_end returns 0.
  ZSTD_CCtx* c = ZSTD_createCCtx();
  ZSTD_CCtx_setParameter(c, ZSTD_c_compressionLevel, 3);
  ZSTD_CCtx_setParameter(c, ZSTD_c_checksumFlag, checksum ? 1 : 0);
  std::vector<std::byte> out;
  std::vector<std::byte> buf(ZSTD_CStreamOutSize());
  ZSTD_inBuffer in{raw.data(), raw.size(), 0};
  size_t rem = 0;
  do {
    ZSTD_outBuffer ob{buf.data(), buf.size(), 0};
    rem = ZSTD_compressStream2(c, &ob, &in, ZSTD_e_end);
    EXPECT_FALSE(ZSTD_isError(rem)) << ZSTD_getErrorName(rem);
    out.insert(out.end(), buf.begin(), buf.begin() + static_cast<std::ptrdiff_t>(ob.pos));
  } while (rem != 0 && !ZSTD_isError(rem));
  ZSTD_freeCCtx(c);
  return out;
}

std::vector<float> read_all(CaptureReader& r, size_t chunk) {
  std::vector<float> all, buf(chunk);
  while (size_t n = r.read(buf)) all.insert(all.end(), buf.begin(), buf.begin() + static_cast<std::ptrdiff_t>(n));
  return all;
}

std::vector<float> read_all(const fs::path& p, const LoadOptions& o, size_t chunk) {
  auto r = open_capture(p, o);
  return read_all(r, chunk);
}

std::string expect_error(const std::function<void()>& f, ErrorKind kind, const std::vector<std::string>& needles) {
  try {
    f();
  } catch (const Error& e) {
    EXPECT_EQ(static_cast<int>(e.kind()), static_cast<int>(kind)) << e.what();
    std::string msg = e.what();
    for (const auto& n : needles) EXPECT_NE(msg.find(n), std::string::npos) << "\"" << n << "\" not in: " << msg;
    return msg;
  } catch (const std::exception& e) {
    ADD_FAILURE() << "not a salvor::Error: " << e.what();
    return {};
  }
  ADD_FAILURE() << "no error thrown";
  return {};
}

long peak_rss_kib() {
  std::ifstream f("/proc/self/status");
  std::string line;
  while (std::getline(f, line))
    if (line.rfind("VmHWM:", 0) == 0) return std::stol(line.substr(6));
  return -1;
}

bool reset_peak_rss() {
  std::ofstream f("/proc/self/clear_refs");
  f << "5";
  f.flush();
  return f.good();
}

void make_sparse(const fs::path& p, uint64_t bytes) {
  std::FILE* f = std::fopen(p.c_str(), "wb");
  ASSERT_NE(f, nullptr);
  ASSERT_EQ(::ftruncate(::fileno(f), static_cast<off_t>(bytes)), 0);
  std::fclose(f);
}

uint64_t drain_zeros(CaptureReader& r) {
  std::vector<float> buf(65536);
  uint64_t total = 0;
  bool all_zero = true;
  while (size_t n = r.read(buf)) {
    for (size_t i = 0; i < n; ++i) all_zero = all_zero && buf[i] == 0.0f;
    total += n;
  }
  EXPECT_TRUE(all_zero);
  return total;
}

LoadOptions rate_option(double hz) {
  LoadOptions o;
  o.sample_rate_hz = hz;
  return o;
}
LoadOptions channel_option(int channel) {
  LoadOptions o;
  o.channel = channel;
  return o;
}
LoadOptions sidecar_option(const fs::path& sidecar) {
  LoadOptions o;
  o.sidecar_path = sidecar;
  return o;
}

std::vector<float> as_float(const std::vector<int16_t>& v) {
  std::vector<float> f(v.size());
  for (size_t i = 0; i < v.size(); ++i) f[i] = static_cast<float>(v[i]) / 32768.0f;
  return f;
}

}  // namespace salvor::load::test
