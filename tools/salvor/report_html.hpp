#pragma once
// The page of `salvor report`: one self-contained HTML file (inline CSS and SVG, no
// scripts, nothing fetched) built from a decode folder and, when the capture is at hand,
// the probe of the chosen sector's capture. It is also well-formed XML, so any XML parser
// can check it.

#include <cstdint>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "report_waveform.hpp"
#include "results/decode_folder.hpp"

namespace salvor::cli {

struct ReportInput {
  const results::DecodeFolder* folder = nullptr;
  const nlohmann::json* run = nullptr;
  std::string image_sha256;
  std::string run_date;                 // when the decode ran (run.json or its file time)
  uint64_t eye_lba = 0;                 // the sector the waveform plots are about
  std::string eye_choice;               // why that sector ("first unverified sector found", "--sector")
  const WaveformResult* waveform = nullptr;
  size_t unverified_rows = 500;         // the list of unverified sectors stops here, with a count
  size_t track_points = 720;            // tracks are grouped into at most this many points
};

struct ReportSummary {
  std::vector<std::string> sections;    // ids of the sections written
  std::vector<std::string> plots;       // ids of the plots written
  std::vector<std::string> notes;       // what is missing and why
};

std::string render_report(const ReportInput& in, ReportSummary& summary);

}  // namespace salvor::cli
