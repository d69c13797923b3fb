#pragma once
// The waveform side of `salvor report`: finds the capture that holds a sector (from the
// sector's log line and run.json's inputs), checks it is the file that was decoded
// (SHA-256 against run.json), and re-decodes that one capture with a CaptureProbe to get
// the PLL trace, the equalized samples of the sector, the equalizer and the raw samples.

#include <cstdint>
#include <filesystem>
#include <optional>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "pipeline/capture_decoder.hpp"
#include "results/sector_result.hpp"

namespace salvor::cli {

// The inverse of pipeline::settings_json: keys missing from `j` keep their defaults.
// Throws salvor::Error(input) naming `where` and the key on a value of the wrong type.
pipeline::DecodeSettings settings_from_json(const nlohmann::json& j, const std::string& where);

struct CaptureChoice {
  std::filesystem::path path;          // as recorded in run.json (absolute)
  std::string recorded_sha256;         // "" if run.json holds none
  std::optional<int> cylinder, head, revolution;
  bool same_sector = false;            // the capture holds the sector itself (not only its track)
};

// Which capture to probe for `sector`: the one named in its log line, else the first
// capture of its track. std::nullopt (with `why`) if run.json names none.
std::optional<CaptureChoice> choose_capture(const nlohmann::json& run, const results::SectorAttempt& sector,
                                            std::string& why);

struct WaveformResult {
  bool available = false;
  std::string why_not;                 // shown in the page when !available
  CaptureChoice capture;
  pipeline::CaptureProbe probe;
  std::string target_name;
  // Period in channel bits of the written (NRZ) levels of the format's preamble and gap
  // patterns: their spectral lines sit at bit rate / period (0: the pattern has no tone).
  int preamble_period_bits = 0, gap_period_bits = 0;
  double probed_position = -1;         // sync-mark position of the probed attempt in the capture
};

// The period of the NRZ levels written by repeating an NRZI pattern: the pattern's length,
// doubled when it holds an odd number of transitions (the level is inverted after one
// repeat). 0 for a pattern without transitions.
int nrz_period_bits(const std::vector<uint8_t>& nrzi_pattern);

// Checks the capture (and its sidecar) against run.json and probes it. A missing capture
// gives available = false and the reason; a capture whose SHA-256 differs from run.json
// throws salvor::Error(input) naming the file (the plots would describe other data).
WaveformResult probe_sector_capture(const std::filesystem::path& folder, const nlohmann::json& run,
                                    const results::SectorAttempt& sector, size_t raw_samples_wanted);

}  // namespace salvor::cli
