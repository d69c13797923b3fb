#include "compare/score.hpp"

#include <algorithm>
#include <cmath>

#include "common/error.hpp"
#include "common/sha256.hpp"
#include "format/track_codec.hpp"

namespace salvor::compare {

namespace fs = std::filesystem;

TruthImage::TruthImage(fs::path image, const format::TrackFormat& fmt, const std::string& expect_sha256)
    : path_(std::move(image)), fmt_(fmt) {
  if (!fs::is_regular_file(path_)) throw_input(path_.string(), "truth image missing");
  const uint64_t want = fmt_.image_bytes();
  const uint64_t have = fs::file_size(path_);
  if (have != want)
    throw_input(path_.string(), "truth image is " + std::to_string(have) + " bytes, format " + fmt_.name +
                                    " needs " + std::to_string(want));
  if (!expect_sha256.empty()) {
    const std::string got = sha256_file_hex(path_);
    if (got != expect_sha256)
      throw_input(path_.string(), "SHA-256 " + got.substr(0, 16) + "... differs from the manifest's " +
                                      expect_sha256.substr(0, 16) + "...: truth image changed");
  }
  in_.open(path_, std::ios::binary);
  if (!in_) throw_input(path_.string(), "cannot open the truth image");
}

std::vector<uint8_t> TruthImage::sector(uint64_t lba) const {
  if (lba >= fmt_.total_sectors()) throw_internal("truth sector " + std::to_string(lba) + " outside the image");
  std::vector<uint8_t> out(static_cast<size_t>(fmt_.user_bytes));
  std::lock_guard<std::mutex> lock(mutex_);
  in_.clear();
  in_.seekg(static_cast<std::streamoff>(lba * static_cast<uint64_t>(fmt_.user_bytes)));
  in_.read(reinterpret_cast<char*>(out.data()), static_cast<std::streamsize>(out.size()));
  if (!in_) throw_input(path_.string(), "read error at sector " + std::to_string(lba));
  return out;
}

std::vector<uint8_t> TruthImage::header_data_bits(uint64_t lba) const {
  const int spt = fmt_.sectors_per_track;
  // LBA order of the format: cylinder, then head, then sector (format::TrackFormat::lba).
  const int cylinder = static_cast<int>(lba / (static_cast<uint64_t>(fmt_.heads) * spt));
  const int head = static_cast<int>((lba / static_cast<uint64_t>(spt)) % static_cast<uint64_t>(fmt_.heads));
  const int sector = static_cast<int>(lba % static_cast<uint64_t>(spt));
  if (fmt_.lba(cylinder, head, sector) != lba) throw_internal("lba order of the format is not cylinder-head-sector");
  const std::vector<uint8_t> user = this->sector(lba);
  std::vector<uint8_t> bits = format::encode_sector_bits(fmt_, format::make_sector_header(fmt_, cylinder, head, sector), user);
  const size_t first = static_cast<size_t>(fmt_.preamble_bits) + fmt_.sync_mark.size();
  const size_t len = static_cast<size_t>(fmt_.header_bits + fmt_.data_bits);
  if (bits.size() < first + len) throw_internal("encoded sector shorter than its fields");
  return std::vector<uint8_t>(bits.begin() + static_cast<long>(first), bits.begin() + static_cast<long>(first + len));
}

BitCount count_bit_errors(std::span<const uint8_t> detected, std::span<const uint8_t> truth) {
  BitCount c;
  c.compared = truth.size();
  const size_t n = std::min(detected.size(), truth.size());
  for (size_t i = 0; i < n; ++i) c.errors += (detected[i] != 0) != (truth[i] != 0);
  c.errors += truth.size() - n;  // not delivered
  return c;
}

nlohmann::json EntryScore::to_json() const {
  nlohmann::json cal = nlohmann::json::array();
  for (const auto& b : calibration)
    cal.push_back({{"lo", b.lo}, {"hi", b.hi}, {"count", b.count}, {"mean_confidence", b.mean_confidence},
                   {"share_correct", b.share_correct}});
  return {{"detector", detector},
          {"entry", entry},
          {"captures", captures},
          {"sectors", sectors},
          {"verified", verified},
          {"found", found},
          {"verified_share", verified_share()},
          {"failure_rate", failure_rate()},
          {"attempts", attempts},
          {"bits_compared", bits_compared},
          {"bit_errors", bit_errors},
          {"bit_error_rate", bit_error_rate()},
          {"bytes_compared", bytes_compared},
          {"byte_errors", byte_errors},
          {"byte_error_rate", byte_error_rate()},
          {"silent_errors", silent_errors},
          {"silent_detail", silent_detail},
          {"calibration", cal},
          {"calibration_count", calibration_count},
          {"brier", brier},
          {"samples", samples},
          {"decode_seconds", decode_seconds},
          {"samples_per_second", samples_per_second()}};
}

EntryScorer::EntryScorer(std::string detector, std::string entry, const format::TrackFormat& fmt,
                         const TruthImage& truth, std::vector<std::pair<int, int>> tracks)
    : fmt_(fmt), truth_(truth), tracks_(std::move(tracks)) {
  std::sort(tracks_.begin(), tracks_.end());
  tracks_.erase(std::unique(tracks_.begin(), tracks_.end()), tracks_.end());
  score_.detector = std::move(detector);
  score_.entry = std::move(entry);
  score_.sectors = tracks_.size() * static_cast<uint64_t>(fmt_.sectors_per_track);
  best_.resize(score_.sectors);
  have_.assign(score_.sectors, false);
}

int EntryScorer::index_of(const results::SectorAttempt& a) const {
  auto it = std::lower_bound(tracks_.begin(), tracks_.end(), std::make_pair(a.cylinder, a.head));
  if (it == tracks_.end() || *it != std::make_pair(a.cylinder, a.head)) return -1;
  if (a.sector < 0 || a.sector >= fmt_.sectors_per_track) return -1;
  if (fmt_.lba(a.cylinder, a.head, a.sector) != a.lba) return -1;
  return static_cast<int>((it - tracks_.begin()) * fmt_.sectors_per_track + a.sector);
}

void EntryScorer::add_capture(const std::vector<results::SectorAttempt>& attempts, uint64_t samples, double seconds) {
  ++score_.captures;
  score_.samples += samples;
  score_.decode_seconds += seconds;
  for (const auto& a : attempts) {
    ++score_.attempts;
    if (a.status == results::SectorStatus::missing) continue;
    const int idx = index_of(a);
    if (idx < 0) continue;  // an address outside the captured tracks: no truth to hold it to
    if (!a.channel_bits.empty()) {
      BitCount bc = count_bit_errors(a.channel_bits, truth_.header_data_bits(a.lba));
      score_.bits_compared += bc.compared;
      score_.bit_errors += bc.errors;
    }
    const std::vector<uint8_t> truth = truth_.sector(a.lba);
    const bool right = a.data == truth;
    if (results::is_verified(a.status) && !right) {
      size_t differ = 0;
      for (size_t i = 0; i < truth.size(); ++i) differ += i >= a.data.size() || a.data[i] != truth[i];
      ++score_.silent_errors;
      score_.silent_detail.push_back("lba " + std::to_string(a.lba) + " (" + std::to_string(a.cylinder) + "/" +
                                     std::to_string(a.head) + "/" + std::to_string(a.sector) + ", " + a.capture +
                                     "): " + results::to_string(a.status) + " but " + std::to_string(differ) +
                                     " bytes differ from the truth");
    }
    int bin = std::clamp(static_cast<int>(std::floor(a.confidence * kCalibrationBins)), 0, kCalibrationBins - 1);
    ++bin_count_[static_cast<size_t>(bin)];
    bin_conf_[static_cast<size_t>(bin)] += a.confidence;
    bin_right_[static_cast<size_t>(bin)] += right ? 1.0 : 0.0;
    const double r = right ? 1.0 : 0.0;
    brier_sum_ += (a.confidence - r) * (a.confidence - r);
    if (!have_[static_cast<size_t>(idx)] || results::better_than(a, best_[static_cast<size_t>(idx)])) {
      best_[static_cast<size_t>(idx)] = a;
      best_[static_cast<size_t>(idx)].channel_bits.clear();
      have_[static_cast<size_t>(idx)] = true;
    }
  }
}

EntryScore EntryScorer::finish() const {
  EntryScore s = score_;
  for (size_t i = 0; i < best_.size(); ++i) {
    if (!have_[i]) continue;
    const auto& a = best_[i];
    ++s.found;
    if (results::is_verified(a.status)) ++s.verified;
    const std::vector<uint8_t> truth = truth_.sector(a.lba);
    s.bytes_compared += truth.size();
    for (size_t k = 0; k < truth.size(); ++k) s.byte_errors += k >= a.data.size() || a.data[k] != truth[k];
  }
  s.calibration.clear();
  s.calibration_count = 0;
  for (int b = 0; b < kCalibrationBins; ++b) {
    CalibrationBin cb;
    cb.lo = static_cast<double>(b) / kCalibrationBins;
    cb.hi = static_cast<double>(b + 1) / kCalibrationBins;
    cb.count = bin_count_[static_cast<size_t>(b)];
    if (cb.count) {
      cb.mean_confidence = bin_conf_[static_cast<size_t>(b)] / static_cast<double>(cb.count);
      cb.share_correct = bin_right_[static_cast<size_t>(b)] / static_cast<double>(cb.count);
    }
    s.calibration_count += cb.count;
    s.calibration.push_back(cb);
  }
  s.brier = s.calibration_count ? brier_sum_ / static_cast<double>(s.calibration_count) : std::nan("");
  return s;
}

}  // namespace salvor::compare
