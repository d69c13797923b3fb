#pragma once
// Capture readers: any capture file becomes a stream of float samples of one channel,
// together with what is known about it (rate, track address, sidecar).
//
//   auto reader = salvor::load::open_capture("c003-h1-r2.flac");
//   std::vector<float> chunk(65536);
//   while (size_t n = reader.read(chunk)) consume(std::span(chunk).first(n));
//
// Containers (detected by magic bytes first, then by file name; LoadOptions::container
// forces one):
//   sndfile   everything libsndfile 1.2.0 reads: WAV, W64, RF64, FLAC, AIFF, ...
//             magic "RIFF" / "RIFX" / "RF64" / W64 "riff" GUID / "fLaC" / "FORM"
//   zstd_raw  headerless samples compressed with zstd (magic 28 B5 2F FD, or a skippable
//             frame 5x 2A 4D 18), decompressed as a stream (RFC 8878 frames)
//   sigmf     a SigMF recording: <name>.sigmf-meta (JSON) + <name>.sigmf-data
//   csv       digitizer text export: time and value columns
//   raw       headerless samples (.raw .bin .pcm .i8 .u8 .i16 .i32 .f32 .f64)
//
// Sample scale (the same underlying integers give the same floats in every container):
//   PCM integer in libsndfile containers: full scale = ±1.0 (sf_read_float, normalised)
//   raw / zstd / SigMF integers: the table in load/sample_encoding.hpp (int16: v/32768)
//   float data: as stored; CSV: the value as written
// CaptureInfo::full_scale says what value a full-scale sample has after loading (1.0 for
// integer encodings unless the sidecar says otherwise).
//
// Precedence of every property: LoadOptions fields that are set > sidecar (or the SigMF
// metadata) > the container itself > a hint from the file name. Errors are listed in
// core/load/README.md; every one is a salvor::Error naming the file.
//
// Memory is bounded by LoadOptions::chunk_samples (and zstd's window limit, 2^27 bytes by
// default), never by the length of the capture. Inputs are only ever opened read-only.

#include <cstddef>
#include <cstdint>
#include <filesystem>
#include <memory>
#include <nlohmann/json.hpp>
#include <optional>
#include <span>
#include <string>
#include <string_view>

#include "load/sample_encoding.hpp"

namespace salvor::load {

enum class Container { automatic, sndfile, raw, zstd_raw, sigmf, csv };

std::string_view container_name(Container c);  // "auto", "sndfile", "raw", "zstd", "sigmf", "csv"
// Parses container_name()'s spelling; throws salvor::Error(usage) for anything else.
Container parse_container(std::string_view name);

// Accepted sample rates; anything outside is refused as absurd (common practice, no
// source: audio-rate captures are below any useful drive readback, and 1 THz is far above
// any digitizer).
inline constexpr double kMinSampleRateHz = 1e3;
inline constexpr double kMaxSampleRateHz = 1e12;

struct LoadOptions {
  Container container = Container::automatic;  // force a container instead of detecting
  std::optional<int> channel;                  // 0-based; default: sidecar "channel", else 0
  std::optional<double> sample_rate_hz;        // overrides sidecar and container
  std::optional<SampleEncoding> sample_encoding;  // raw / zstd only; overrides the sidecar
  std::optional<uint64_t> header_bytes;        // raw / zstd / SigMF: bytes to skip at the start
  std::optional<double> bit_rate_hz;           // overrides the sidecar
  std::optional<double> full_scale;            // overrides the sidecar
  std::optional<std::string> format;           // track format descriptor name; overrides sidecar
  // Sidecar: empty = look for "<capture file name>.json" beside the capture.
  std::filesystem::path sidecar_path;
  bool use_sidecar = true;                     // false: ignore any sidecar beside the capture
  size_t chunk_samples = 65536;                // internal buffer, in samples per channel
  // CSV: 0-based columns; time_column = -1 means there is no time column (the rate must
  // then come from the options or the sidecar).
  int csv_time_column = 0;
  int csv_value_column = 1;
  double csv_step_tolerance = 1e-3;            // allowed |step - mean step| / mean step
};

struct CaptureInfo {
  std::filesystem::path path;          // as given to open_capture
  std::filesystem::path data_path;     // the file the samples come from (SigMF: .sigmf-data)
  std::filesystem::path sidecar_path;  // empty when there is none (SigMF: the .sigmf-meta)
  Container container = Container::automatic;
  std::string container_detail;  // e.g. "WAV (Microsoft), pcm_16" or "zstd raw int16_le"
  std::string sample_encoding;   // raw: encoding_name(); sndfile: "pcm_16", "float", ...; csv: "text"
  double sample_rate_hz = 0;
  std::string sample_rate_source;  // "option", "sidecar", "sigmf", "container", "csv time column"
  int channels = 1;
  int channel = 0;                        // the channel read() returns
  std::optional<uint64_t> total_samples;  // per channel, when known before reading
  double full_scale = 1.0;
  std::optional<double> bit_rate_hz;
  std::string format;                     // track format descriptor name, "" if unknown
  std::optional<int> cylinder, head, revolution;
  nlohmann::json sidecar;                 // the parsed sidecar / SigMF meta, or null
};

namespace detail {
// One per container: produces the chosen channel's samples, unchecked.
class SampleSource {
 public:
  virtual ~SampleSource() = default;
  // Fills up to out.size() samples; fewer only at the end of the capture.
  virtual size_t read(std::span<float> out) = 0;
  virtual void rewind() = 0;
};
}  // namespace detail

// A capture opened for streaming. Holds an open file: movable, not copyable.
class CaptureReader {
 public:
  CaptureReader(CaptureInfo info, std::unique_ptr<detail::SampleSource> source);
  CaptureReader(CaptureReader&&) noexcept;
  CaptureReader& operator=(CaptureReader&&) noexcept;
  ~CaptureReader();

  const CaptureInfo& info() const { return info_; }
  // Fills `out` with the next samples of the chosen channel; returns how many, which is
  // less than out.size() only at the end (0 once the end is reached). Throws
  // salvor::Error(input) for a NaN or infinite sample (naming its index), a capture with
  // no samples, or a damaged stream (corrupt/truncated zstd frame, libsndfile decode error).
  size_t read(std::span<float> out);
  // Back to the first sample.
  void rewind();
  uint64_t position() const { return position_; }  // samples returned so far
  std::string describe() const;                   // one line: file, container, rate, channel

 private:
  CaptureInfo info_;
  std::unique_ptr<detail::SampleSource> source_;
  uint64_t position_ = 0;
};

// Opens a capture and its sidecar. Throws salvor::Error(input, path, ...) for a bad file or
// sidecar, salvor::Error(usage, ...) for options that cannot apply (see README.md).
CaptureReader open_capture(const std::filesystem::path& path, const LoadOptions& options = {});

// Which container a file is, by magic bytes, then by name; nullopt if neither tells.
std::optional<Container> detect_container(const std::filesystem::path& path);

}  // namespace salvor::load
