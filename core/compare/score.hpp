#pragma once
// Scoring of one detector on one corpus entry against the ground truth.
//
//   sectors verified      final result per sector (best attempt, results::better_than),
//                         over every sector of the captured tracks
//   bit error rate        before ECC: detected channel bits (header + data, NRZI) against
//                         the reference encoder's bits of the true sector
//                         (format::encode_sector_bits), over every attempt found; bits
//                         the detector did not deliver (capture ended) count as errors
//   byte error rate       after ECC: user data of each found sector's final result against
//                         the true sector (missing sectors count in the failure rate only)
//   silent errors         an attempt marked good/corrected whose bytes differ from the
//                         truth: a decoder that ever does this cannot be trusted on evidence
//   calibration           reliability diagram of the sector confidence: attempts binned by
//                         confidence, mean confidence against the share whose bytes are
//                         right, and the Brier score mean((c - correct)^2) (Brier, Monthly
//                         Weather Review 78(1), 1950; reliability diagrams: Murphy &
//                         Winkler, Applied Statistics 26(1), 1977)
//   throughput            capture samples per second of decoding (summed over workers)

#include <cmath>
#include <cstdint>
#include <filesystem>
#include <fstream>
#include <mutex>
#include <span>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "format/track_format.hpp"
#include "results/sector_result.hpp"

namespace salvor::compare {

// The true image of a corpus entry, read a sector at a time (memory does not grow with
// the image). Thread-safe.
class TruthImage {
 public:
  // Checks the size against the format and, when given, the SHA-256 from the manifest.
  TruthImage(std::filesystem::path image, const format::TrackFormat& fmt, const std::string& expect_sha256 = "");
  std::vector<uint8_t> sector(uint64_t lba) const;
  // Channel bits of the true sector from the first header bit to the last data bit.
  std::vector<uint8_t> header_data_bits(uint64_t lba) const;
  const std::filesystem::path& path() const { return path_; }

 private:
  std::filesystem::path path_;
  format::TrackFormat fmt_;  // a copy: the truth outlives no caller's format
  mutable std::mutex mutex_;
  mutable std::ifstream in_;
};

// Bit errors of one attempt before ECC. `compared` is the true length; missing bits count.
struct BitCount {
  uint64_t compared = 0;
  uint64_t errors = 0;
};
BitCount count_bit_errors(std::span<const uint8_t> detected, std::span<const uint8_t> truth);

struct CalibrationBin {
  double lo = 0, hi = 0;         // confidence range [lo, hi) (the last bin includes 1)
  uint64_t count = 0;
  double mean_confidence = 0;    // predicted
  double share_correct = 0;      // observed
};

struct EntryScore {
  std::string detector;
  std::string entry;
  uint64_t captures = 0;
  uint64_t sectors = 0;          // sectors of the captured tracks
  uint64_t verified = 0;         // final good + corrected
  uint64_t found = 0;            // final not missing
  uint64_t attempts = 0;
  uint64_t bits_compared = 0, bit_errors = 0;
  uint64_t bytes_compared = 0, byte_errors = 0;
  uint64_t silent_errors = 0;
  std::vector<std::string> silent_detail;  // "lba N (cylinder/head/sector, capture): status, k bytes differ"
  std::vector<CalibrationBin> calibration;
  uint64_t calibration_count = 0;
  double brier = 0;
  uint64_t samples = 0;
  double decode_seconds = 0;

  double verified_share() const { return sectors ? static_cast<double>(verified) / sectors : 0.0; }
  double failure_rate() const { return sectors ? 1.0 - verified_share() : 0.0; }
  // NaN when nothing was compared (no sector found): "no data", not "no errors".
  double bit_error_rate() const { return bits_compared ? static_cast<double>(bit_errors) / bits_compared : std::nan(""); }
  double byte_error_rate() const { return bytes_compared ? static_cast<double>(byte_errors) / bytes_compared : std::nan(""); }
  double samples_per_second() const { return decode_seconds > 0 ? samples / decode_seconds : 0.0; }
  nlohmann::json to_json() const;
};

inline constexpr int kCalibrationBins = 10;

// Collects the attempts of one (detector, entry) and scores them.
class EntryScorer {
 public:
  // `tracks`: the (cylinder, head) pairs the entry's captures cover.
  EntryScorer(std::string detector, std::string entry, const format::TrackFormat& fmt, const TruthImage& truth,
              std::vector<std::pair<int, int>> tracks);
  // Adds one capture's attempts. Counts the bit errors of attempts carrying channel bits.
  // Attempts must carry their user data (the decoder's best guess).
  void add_capture(const std::vector<results::SectorAttempt>& attempts, uint64_t samples, double seconds);
  EntryScore finish() const;

 private:
  const format::TrackFormat& fmt_;
  const TruthImage& truth_;
  EntryScore score_;
  std::vector<std::pair<int, int>> tracks_;
  std::vector<results::SectorAttempt> best_;   // per sector of the captured tracks (data kept)
  std::vector<bool> have_;
  // Calibration sums per bin: count, sum of confidence, sum of "bytes right"; Brier sum.
  std::vector<uint64_t> bin_count_ = std::vector<uint64_t>(kCalibrationBins, 0);
  std::vector<double> bin_conf_ = std::vector<double>(kCalibrationBins, 0.0);
  std::vector<double> bin_right_ = std::vector<double>(kCalibrationBins, 0.0);
  double brier_sum_ = 0;
  int index_of(const results::SectorAttempt& a) const;  // -1 when outside the captured tracks
};

}  // namespace salvor::compare
