#pragma once
// What salvor knows about one sector: its status, its confidence and the evidence for
// both. One SectorAttempt per try (a revolution, a detector, a retry strategy); the
// final status of a sector is the best attempt (see best_attempt()).

#include <cstdint>
#include <optional>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

namespace salvor::results {

enum class SectorStatus {
  good,       // CRC verified, no correction needed
  corrected,  // CRC verified after Reed–Solomon correction
  failed,     // found but not verified: the image holds a best guess
  missing,    // never found
  conflict,   // two verified attempts with different contents (after a merge)
};

const char* to_string(SectorStatus s);
SectorStatus status_from_string(const std::string& s);  // throws salvor::Error(input)
inline bool is_verified(SectorStatus s) {
  return s == SectorStatus::good || s == SectorStatus::corrected;
}

struct SectorAttempt {
  // Identity
  uint64_t lba = 0;
  int cylinder = 0;
  int head = 0;
  int sector = 0;
  std::vector<int> revolutions;     // revolutions whose samples went into this attempt
  std::string attempt = "decode";   // which strategy produced it ("decode", "retry:npml", ...)

  // Outcome
  SectorStatus status = SectorStatus::missing;
  double confidence = 0.0;          // in [0, 1]; see confidence.hpp

  // Evidence
  std::string detector;             // plugin name
  nlohmann::json detector_params = nlohmann::json::object();
  bool header_ok = false;           // the header CRC verified
  bool placed_by_position = false;  // address implied by the position on the track
  std::vector<int> rs_corrected;    // symbols corrected per interleave (-1: decoder failure)
  std::vector<int> rs_erasures;     // erasures used per interleave
  int rs_capacity = 0;              // n - k per interleave
  std::string crc = "not_checked";  // "pass", "fail", "not_checked"
  float reliability_min = 0;        // min |LLR| over the sector's data bits
  float reliability_mean = 0;       // mean |LLR|
  double low_reliability_fraction = 0;  // share of data bytes with a weak bit (|LLR| < 2)
  double snr_db = 0;                // estimated over the sector
  double eq_mse = 0;                // equalizer MSE against the target over the sector
  std::string capture;              // capture file (of the first revolution used)
  double capture_position = -1;     // sample index of the sync mark in that capture
  std::vector<std::string> notes;   // human-readable evidence ("header CRC failed: placed at ...")

  // The bytes (best guess when not verified). Not written to the log.
  std::vector<uint8_t> data;
  // Detected channel bits from the first header bit to the last data bit, when the
  // decoder was asked to keep them (corpus comparison counts bit errors before ECC).
  std::vector<uint8_t> channel_bits;
  std::vector<float> channel_llr;  // their LLRs, same positions
};

nlohmann::json to_json(const SectorAttempt& a);
SectorAttempt attempt_from_json(const nlohmann::json& j);  // throws salvor::Error(input)

// The better of two attempts at the same sector: verified beats unverified, then higher
// confidence; never replaces a verified attempt by an unverified one.
bool better_than(const SectorAttempt& a, const SectorAttempt& b);

}  // namespace salvor::results
