#pragma once
// The output folder of a decode, retry or merge:
//   image.bin          every sector at its logical address (best guess when unverified,
//                      a fill pattern when missing or when asked to)
//   sectors.jsonl      the confidence log: one JSON object per sector attempt, appended
//   damage-map.json    the final status and confidence of every sector
//   damage-map.svg     the same as a picture
//   run.json           provenance: versions, parameters, SHA-256 of inputs and outputs
// Every file is written under a temporary name and renamed when complete, so an
// interrupted run never leaves a half-written file under a final name. A verified
// sector is never replaced by an unverified one.

#include <cstdint>
#include <cstdio>
#include <filesystem>
#include <memory>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "results/damage_map.hpp"
#include "results/sector_result.hpp"

namespace salvor::results {

struct FillPolicy {
  bool fill_unverified = false;  // write the fill pattern instead of a failed sector's best guess
  int fill_byte = -1;            // -1: the text marker below; 0..255: that byte
};

// The fill of a sector with no trustworthy data: by default the ASCII text
// "<salvor missing lba=N> " repeated (easy to grep for in an image), or one byte value.
std::vector<uint8_t> fill_pattern(uint64_t lba, int sector_bytes, const FillPolicy& policy,
                                  const char* what);

class DecodeFolder {
 public:
  // A new, empty folder state for an image of this geometry (nothing written yet).
  DecodeFolder(std::filesystem::path dir, Geometry geometry);

  // Reads an existing output folder (image.bin, sectors.jsonl, damage-map.json, run.json).
  // Throws salvor::Error(input) naming the file on anything missing or inconsistent.
  static DecodeFolder open(const std::filesystem::path& dir);

  // Records one attempt (appended to the log) and keeps it as the sector's final
  // result when it is better (better_than). Returns true if it became the final result.
  bool record(SectorAttempt attempt);
  // The same with the attempt's log line already made (to_json(attempt).dump()), so that
  // parallel workers can render it before they take the lock around the folder.
  bool record(SectorAttempt attempt, const std::string& log_line);

  const Geometry& geometry() const { return geometry_; }
  const std::vector<SectorAttempt>& final_attempts() const { return final_; }
  const SectorAttempt& final_attempt(uint64_t lba) const { return final_.at(lba); }
  size_t new_attempts() const { return new_lines_; }
  nlohmann::json& run_info() { return run_; }  // the command fills it (versions, parameters, inputs)
  const std::filesystem::path& dir() const { return dir_; }

  // For a merge of folders: the log lines already on disk (read by open()), in file order.
  std::vector<std::string> logged_lines() const;
  // For a merge: appends one log line as given (an attempt from another folder, tagged
  // with where it came from) without changing any final result.
  void append_log_line(const nlohmann::json& line);
  // For a merge: sets a sector's final result as the caller decided it (including
  // conflict), bypassing better_than. Throws internal if the lba is outside the image or
  // a found attempt carries no sector_bytes of data.
  void set_final(SectorAttempt attempt);

  // Writes all five files atomically (each temp + rename; run.json last, with the SHA-256
  // of the other four). Returns the SHA-256 of image.bin.
  std::string write(const FillPolicy& fill);

 private:
  std::filesystem::path dir_;
  Geometry geometry_;
  std::vector<SectorAttempt> final_;     // indexed by LBA
  // The log is never held in memory, so that a long decode's log cannot grow the process:
  // this run's lines go to an anonymous temporary file, and write() copies the lines
  // already on disk (log_on_disk_) and then these into the new sectors.jsonl.
  struct FileCloser {
    void operator()(std::FILE* f) const { if (f) std::fclose(f); }
  };
  std::unique_ptr<std::FILE, FileCloser> spool_;
  size_t new_lines_ = 0;
  bool log_on_disk_ = false;  // dir_/sectors.jsonl holds lines that belong to this folder
  void spool_line(const std::string& line);
  std::vector<std::vector<uint8_t>> old_image_;  // sector data from an existing image.bin (open())
  nlohmann::json run_ = nlohmann::json::object();
};

}  // namespace salvor::results
