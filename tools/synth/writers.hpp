#pragma once
// Capture writers: one capture file plus its sidecar, each written under a temporary name
// and renamed when complete (common/atomic_file.hpp). Samples arrive chunk by chunk on the
// digitizer's grid (digitizer.hpp) and are converted to integer codes exactly.
//
// Containers:
//   wav, rf64, w64, flac   through libsndfile; sidecar <file>.json (DEVELOPERS.md schema).
//                          WAV is refused above 4 GiB (its RIFF sizes are 32-bit and
//                          libsndfile reports success while the file reads back truncated);
//                          use rf64 or w64 (EBU Tech 3306; Sony Wave64) for long captures.
//                          Container sample-rate fields are limited (FLAC 655350 Hz,
//                          libsndfile int), so the rate written into the container may be
//                          the true rate divided by a power of ten; the sidecar's
//                          sample_rate_hz is the true rate and wins.
//   sigmf                  headerless little-endian samples (.sigmf-data) with a SigMF
//                          metadata file (.sigmf-meta) carrying the sidecar fields in the
//                          salvor namespace (SigMF specification v1.x, core namespace).
//   zstd                   headerless little-endian samples compressed as one zstd frame,
//                          streamed with ZSTD_compressStream2 and the content checksum on
//                          (RFC 8878); sidecar <file>.json with sample_encoding.

#include <cstdint>
#include <filesystem>
#include <memory>
#include <span>
#include <string>

#include <nlohmann/json.hpp>

#include "synth/digitizer.hpp"

namespace salvor::synth {

enum class Container { wav, rf64, w64, flac, sigmf, zstd };

std::string to_string(Container c);
Container container_from_string(const std::string& s, const std::string& where);
// Name of the capture file for a stem ("c003-h1-r2") in this container.
std::string capture_file_name(const std::string& stem, Container c);
// Name of the metadata file beside it (".json" sidecar, or the .sigmf-meta).
std::string sidecar_file_name(const std::string& stem, Container c);
// Throws usage if the container cannot hold this sample format or this many samples.
void check_container(Container c, SampleFormat f, uint64_t frames, const std::string& where);

// What goes into the sidecar besides the sample description.
struct CaptureMeta {
  double sample_rate_hz = 0;
  double bit_rate_hz = 0;
  std::string format;
  int cylinder = 0, head = 0, revolution = 0;
  double full_scale = 1.0;   // value of a digital full-scale sample after loading (1.0: normalised)
  nlohmann::json rig = nlohmann::json::object();
  nlohmann::json synth = nlohmann::json::object();
};

class CaptureWriter {
 public:
  virtual ~CaptureWriter() = default;
  // Samples on the digitizer grid, in order.
  virtual void write(std::span<const float> samples) = 0;
  // Completes the data file, writes the sidecar, renames both onto their final names.
  virtual void finish(const CaptureMeta& meta) = 0;
  const std::filesystem::path& data_path() const { return data_path_; }
  const std::filesystem::path& meta_path() const { return meta_path_; }

 protected:
  std::filesystem::path data_path_, meta_path_;
};

// Opens a writer for `folder/stem.<ext>`. `frames` is the number of samples that will be
// written (checked against the container's limits before anything is written).
std::unique_ptr<CaptureWriter> open_capture_writer(Container c, SampleFormat f,
                                                   const std::filesystem::path& folder,
                                                   const std::string& stem, uint64_t frames,
                                                   double sample_rate_hz);

// The salvor sidecar object for a capture (DEVELOPERS.md, "Capture sidecar").
nlohmann::json sidecar_json(const CaptureMeta& meta, Container c, SampleFormat f);
// The SigMF metadata object for a capture.
nlohmann::json sigmf_meta_json(const CaptureMeta& meta, SampleFormat f);
// sample_encoding of the sidecar ("int8", "int16_le", "float32_le").
std::string sample_encoding_name(SampleFormat f);
// The rate written into a container's header for a true rate (see above).
double container_sample_rate(Container c, double sample_rate_hz);

}  // namespace salvor::synth
