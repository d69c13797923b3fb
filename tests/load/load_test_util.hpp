#pragma once
// Helpers for the capture-reader tests: a scratch folder per test, writers for every
// container (libsndfile, raw bytes, zstd through libzstd, SigMF JSON, CSV text) and a
// reader that drains a capture in chunks of a chosen size.

#include <cstddef>
#include <cstdint>
#include <filesystem>
#include <functional>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "common/error.hpp"
#include "load/capture_reader.hpp"

namespace salvor::load::test {

namespace fs = std::filesystem;

// A fresh folder under the system temp dir, removed at destruction.
class ScratchDir {
 public:
  ScratchDir();
  ~ScratchDir();
  const fs::path& path() const { return dir_; }
  fs::path operator/(const std::string& name) const { return dir_ / name; }

 private:
  fs::path dir_;
};

// A deterministic int16 sequence covering both extremes, zero and ±1.
std::vector<int16_t> test_int16(size_t n, uint32_t seed = 1);

std::vector<std::byte> concat(std::vector<std::byte> a, const std::vector<std::byte>& b);
void write_bytes(const fs::path& p, const std::vector<std::byte>& bytes);
void write_text(const fs::path& p, const std::string& text);
std::vector<std::byte> read_bytes(const fs::path& p);
void write_json(const fs::path& p, const nlohmann::json& j);

// libsndfile writers (format = SF_FORMAT_* major | subtype); frames interleaved.
void write_sndfile_short(const fs::path& p, int format, int rate, int channels, const std::vector<int16_t>& frames);
void write_sndfile_int(const fs::path& p, int format, int rate, int channels, const std::vector<int32_t>& frames);
void write_sndfile_double(const fs::path& p, int format, int rate, int channels, const std::vector<double>& frames);

// Stored bytes of integer samples.
std::vector<std::byte> int16_bytes(const std::vector<int16_t>& v, bool little_endian);
std::vector<std::byte> int32_bytes(const std::vector<int32_t>& v, bool little_endian);
std::vector<std::byte> float32_bytes(const std::vector<float>& v);
std::vector<std::byte> float64_bytes(const std::vector<double>& v);

// One zstd frame (level 3, content checksum on), compressed with ZSTD_compressStream2.
std::vector<std::byte> zstd_compress(const std::vector<std::byte>& raw, bool checksum = true);

// Reads every sample with read() calls of `chunk` samples.
std::vector<float> read_all(CaptureReader& r, size_t chunk);
std::vector<float> read_all(const fs::path& p, const LoadOptions& o = {}, size_t chunk = 4096);

// Runs `f`, which must throw salvor::Error of `kind` whose message contains every one of
// `needles`. Returns the message (empty and a test failure otherwise).
std::string expect_error(const std::function<void()>& f, ErrorKind kind, const std::vector<std::string>& needles);

// Peak resident memory of this process (VmHWM in /proc/self/status, proc(5)), in KiB.
long peak_rss_kib();
// Resets VmHWM to the current RSS by writing "5" to /proc/self/clear_refs (proc(5)).
bool reset_peak_rss();
// A sparse file of `bytes` zero bytes (no disk blocks used).
void make_sparse(const fs::path& p, uint64_t bytes);
// Reads the capture to the end in chunks of 65536; returns the count, checks all are zero.
uint64_t drain_zeros(CaptureReader& r);

// LoadOptions with one field set.
LoadOptions rate_option(double hz);
LoadOptions channel_option(int channel);
LoadOptions sidecar_option(const fs::path& sidecar);

// int16 → float as libsndfile's sf_read_float gives it (normalised by 1/32768, libsndfile
// api.html; checked in Int16ScaleMatchesLibsndfile).
std::vector<float> as_float(const std::vector<int16_t>& v);

}  // namespace salvor::load::test
