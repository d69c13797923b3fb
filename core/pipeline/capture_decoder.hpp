#pragma once
// Decodes one capture (one revolution of one track) into sector attempts: the whole
// front-to-back chain of salvor, streamed.
//
//   capture ─ load ─ condition ─ resample (samples_per_bit) ─ PLL (1 sample/bit)
//     ─► coarse path: fixed Wiener equalizer (EPR4) ─ coarse detector ─ sync search
//     ─► for every sync mark, the sector window:
//          levels = known preamble + sync bits, coarse decisions elsewhere
//          fine equalizer: LMS-trained on those levels (towards the detector's target)
//          fine detector (the plugin asked for), trained on the same levels if it can
//          header (8/9 decode, CRC-16), data (8/9 decode, RS with erasures, CRC-32)
//
// The coarse path exists because the equalizer can only be trained on known data once
// the sync mark says where the known data is. Memory is bounded by a ring of a few
// sector lengths of bit samples, whatever the capture's length.
//
// A sector whose header fails is kept until the end of the capture and placed by its
// position relative to sectors whose headers verified (the layout fixes the distance in
// bits between any two sectors); its data is then descrambled with the implied address.

#include <cstdint>
#include <functional>
#include <optional>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "detect/plugin_host.hpp"
#include "format/track_format.hpp"
#include "load/capture_reader.hpp"
#include "pipeline/job.hpp"
#include "results/sector_result.hpp"
#include "timing/timing_loop.hpp"

namespace salvor::pipeline {

struct DecodeSettings {
  std::string detector = "viterbi";        // fine detector (plugin name)
  detect::ParamSettings detector_params;   // its parameters as text
  std::string target;                      // "" = the target the detector declares
  size_t gpr_length = 4;                   // for a generalized target
  std::string coarse_detector = "viterbi"; // for the sync search (EPR4)
  double samples_per_bit = 2.0;            // resampler output, per channel bit
  double pll_acquire_bandwidth = 0.02;     // B_nT on the preamble
  double pll_track_bandwidth = 0.004;      // B_nT in data
  double pw50_bits = 2.2;                  // channel guess for the initial equalizers
  double design_snr_db = 20.0;             // noise assumed by the initial Wiener design
  size_t equalizer_taps = 15;
  double equalizer_step = 0.01;            // NLMS step (0, 2)
  int training_epochs = 2;                 // LMS passes over each sector window
  int sync_tolerance = -1;                 // -1: the descriptor's
  bool erasure_search = true;              // reliability-guided erasures when plain RS fails
  std::optional<double> bit_rate_hz;       // overrides sidecar and descriptor
  int chase_bits = 0;                      // Chase-style search over this many weak bits (0: off)
  bool keep_channel_bits = false;          // fill SectorAttempt::channel_bits and channel_llr
};

// Optional look inside one capture's decode, for reports: what to keep, and what was kept.
struct CaptureProbe {
  std::optional<uint64_t> eye_lba;         // keep the equalized samples of this sector
  size_t raw_samples_wanted = 0;           // keep this many capture samples from the start
  // Kept:
  std::vector<timing::TimingTracePoint> pll_trace;  // decimated PLL phase/frequency trace
  std::vector<float> eye_samples;          // equalized samples from the header to the data end
  std::vector<float> eye_ideal;            // target applied to the decided levels, same positions
  std::vector<double> target;              // the fine equalizer's target
  std::vector<double> equalizer_taps;      // its taps after that sector
  std::vector<float> raw_samples;          // the first raw_samples_wanted capture samples
  double sample_rate_hz = 0, bit_rate_hz = 0;
};

struct CaptureSummary {
  std::string path;
  uint64_t samples = 0;
  double sample_rate_hz = 0;
  double bit_rate_hz = 0;
  std::string bit_rate_source;
  int cylinder = -1, head = -1, revolution = -1;
  uint64_t bits = 0;
  uint64_t sync_marks = 0;
  uint64_t truncated_sectors = 0;          // cut off by the end of the capture (not attempted)
  uint64_t lock_losses = 0, cycle_slips = 0;
  double rate_offset_ppm = 0;
  double clipped_fraction = 0;
  std::vector<double> equalizer_taps;      // fine equalizer at the end
  std::vector<double> target;
  std::string target_name;
  nlohmann::json to_json() const;
};

using SectorSink = std::function<void(results::SectorAttempt&&)>;

struct CaptureResult {
  std::vector<results::SectorAttempt> sectors;
  CaptureSummary summary;
};

class CaptureDecoder {
 public:
  CaptureDecoder(const format::TrackFormat& fmt, const detect::PluginHost& host,
                 const DecodeSettings& settings);
  // Throws salvor::Error(input) for an unreadable capture or one of another format.
  // With a sink, every sector attempt is handed to it as soon as it is final and
  // CaptureResult::sectors stays empty; without one they are collected there.
  CaptureResult decode(const JobCapture& capture, const load::LoadOptions& load_options = {},
                       CaptureProbe* probe = nullptr, const SectorSink& sink = {});
  // Run load, conditioning, resampling and the PLL on a second thread while this one
  // frames and decodes sectors: for a job with a spare core per capture. The output is
  // the same either way.
  void set_front_end_thread(bool on) { front_end_thread_ = on; }

 private:
  const format::TrackFormat& fmt_;
  const detect::PluginHost& host_;
  DecodeSettings settings_;
  bool front_end_thread_ = false;
};

}  // namespace salvor::pipeline
