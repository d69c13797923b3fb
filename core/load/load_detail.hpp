#pragma once
// Internal pieces of the capture readers, shared by the container implementations.
// Not part of the stable interface: include load/capture_reader.hpp instead.

#include <cstddef>
#include <cstdint>
#include <filesystem>
#include <memory>
#include <nlohmann/json.hpp>
#include <optional>
#include <span>
#include <string>
#include <vector>

#include "load/capture_reader.hpp"

namespace salvor::load::detail {

// ---- files ----------------------------------------------------------------------------

// A file opened read-only (O_RDONLY | O_CLOEXEC). The constructor refuses, as
// salvor::Error(input, path): a missing file, a directory, anything but a regular file,
// a file it may not read, and (unless allow_empty) an empty file.
class InputFile {
 public:
  explicit InputFile(const std::filesystem::path& path, bool allow_empty = false);
  ~InputFile();
  InputFile(const InputFile&) = delete;
  InputFile& operator=(const InputFile&) = delete;

  int fd() const { return fd_; }
  uint64_t size() const { return size_; }
  const std::string& name() const { return name_; }  // the path as text, for messages
  // Reads up to out.size() bytes at `offset`; returns fewer only at the end of the file.
  size_t read_at(uint64_t offset, std::span<std::byte> out) const;
  // Hands the descriptor to someone who will close it (libsndfile).
  int release();

 private:
  int fd_ = -1;
  uint64_t size_ = 0;
  std::string name_;
};

// The first `n` bytes of a file (fewer if it is shorter).
std::vector<std::byte> read_prefix(const InputFile& file, size_t n);
// A whole small text file (JSON metadata), refusing anything above `limit` bytes.
std::string read_small_file(const InputFile& file, size_t limit);

// "250 MHz", "48 kHz", "44.1 kHz", "0 Hz": for messages.
std::string format_hz(double hz);

// ---- sidecars -------------------------------------------------------------------------

// The salvor fields of a sidecar (or of a SigMF global object), type-checked.
struct SidecarFields {
  std::filesystem::path path;  // where they came from, for messages
  nlohmann::json json;
  std::optional<double> sample_rate_hz, bit_rate_hz, full_scale;
  std::optional<std::string> format;
  std::optional<int> cylinder, head, revolution, channel;
  std::optional<SampleEncoding> sample_encoding;
};

// Reads and checks "<capture>.json" (salvor_sidecar 1).
SidecarFields read_sidecar(const std::filesystem::path& sidecar_path);

// Reads one typed field; throws salvor::Error(input, where, ...) when it has the wrong type.
std::optional<double> json_positive_number(const nlohmann::json& obj, const std::string& key,
                                           const std::string& where);
std::optional<double> json_number(const nlohmann::json& obj, const std::string& key,
                                  const std::string& where);
std::optional<int64_t> json_non_negative_integer(const nlohmann::json& obj, const std::string& key,
                                                 const std::string& where);
std::optional<std::string> json_string(const nlohmann::json& obj, const std::string& key,
                                       const std::string& where);

// ---- sample sources -------------------------------------------------------------------

// What a container reader found in the file itself, before sidecar and options.
struct ContainerFacts {
  std::filesystem::path data_path;
  std::string detail;               // container_detail
  std::string sample_encoding;
  int channels = 1;
  std::optional<double> sample_rate_hz;  // what the file header says, if anything
  // The largest rate this container stores exactly; a sidecar rate at or below it that
  // differs from the header is a contradiction, above it the sidecar simply wins.
  double max_exact_rate_hz = 0;
  bool rate_is_measured = false;    // CSV: the rate was derived from time stamps
  std::optional<uint64_t> total_samples;  // per channel
};

// Headerless samples, plain (raw) or through a zstd decompressor, possibly interleaved.
struct EncodedLayout {
  SampleEncoding encoding = SampleEncoding::int16_le;
  int channels = 1;
  int channel = 0;
  uint64_t start_byte = 0;  // first sample byte (after a header); for zstd: in the decompressed stream
  uint64_t end_byte = 0;    // raw only: one past the last sample byte
};

std::unique_ptr<SampleSource> make_raw_source(std::unique_ptr<InputFile> file,
                                              const EncodedLayout& layout, size_t chunk_samples);
std::unique_ptr<SampleSource> make_zstd_source(std::unique_ptr<InputFile> file,
                                               const EncodedLayout& layout, size_t chunk_samples);

// libsndfile containers. open_sndfile() reads the header; the source is made once the
// channel is known.
class SndfileHandle;
struct SndfileOpened {
  std::shared_ptr<SndfileHandle> handle;
  ContainerFacts facts;
};
SndfileOpened open_sndfile(const std::filesystem::path& path);
std::unique_ptr<SampleSource> make_sndfile_source(std::shared_ptr<SndfileHandle> handle, int channel,
                                                  size_t chunk_samples);

// CSV: scan_csv() reads the whole file once (streaming) to check every line and derive
// the rate; the source then parses the value column again.
struct CsvLayout {
  int time_column = 0;   // -1: none
  int value_column = 1;
  double step_tolerance = 1e-3;
};
ContainerFacts scan_csv(const std::filesystem::path& path, const CsvLayout& layout);
std::unique_ptr<SampleSource> make_csv_source(const std::filesystem::path& path, const CsvLayout& layout);

}  // namespace salvor::load::detail
