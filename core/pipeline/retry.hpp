#pragma once
// Re-decoding the sectors of a decode folder that are not verified. Strategies are tried
// in a fixed, recorded order; each re-decodes only the captures of tracks that still
// hold unverified sectors, records attempts only for those sectors, then sums the
// detectors' LLRs across the revolutions of each still-unverified sector and decodes
// the sum. Every decode uses the erasure and Chase-style searches (sector_decode.hpp).
// Nothing ever replaces a verified sector (DecodeFolder::record); the folder is written
// after every strategy, so an interrupted retry loses at most the strategy in progress,
// and a strategy already in the folder's history is not tried again.

#include <functional>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "detect/plugin_host.hpp"
#include "format/track_format.hpp"
#include "pipeline/capture_decoder.hpp"
#include "pipeline/job.hpp"
#include "results/decode_folder.hpp"

namespace salvor::pipeline {

struct RetryStrategy {
  std::string name;         // e.g. "pdnp", "pdnp/eq21", "npml/E2PR4", "pdnp/combined"
  DecodeSettings settings;
  bool combine_revolutions = false;  // decode the aligned average of each track's revolutions
};

// The standard order: other detectors first (the most capable first), then front-end
// and target variants of the best one. `detectors` (empty = all loadable that the
// pipeline supports) limits the detectors used.
std::vector<RetryStrategy> retry_strategies(const DecodeSettings& base, const detect::PluginHost& host,
                                            const std::vector<std::string>& detectors);

struct RetryOptions {
  unsigned threads = 0;
  double budget_seconds = 0;                 // 0 = no limit; checked between strategies
  std::vector<std::string> already_tried;    // from the folder's history
  std::function<void(const std::string& strategy, size_t done, size_t total)> progress;
  // Called after each strategy with its report, so the caller can checkpoint the folder.
  std::function<void(const nlohmann::json& strategy_report)> after_strategy;
};

struct RetryReport {
  nlohmann::json strategies = nlohmann::json::array();  // name, captures, attempts, recovered, seconds
  size_t recovered = 0;
  bool budget_exhausted = false;
  bool nothing_to_do = false;
};

RetryReport run_retry(const Job& job, const format::TrackFormat& fmt, const detect::PluginHost& host,
                      const std::vector<RetryStrategy>& strategies, results::DecodeFolder& folder,
                      const RetryOptions& options);

}  // namespace salvor::pipeline
