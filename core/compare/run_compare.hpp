#pragma once
// Runs detectors over a corpus: every capture of every entry is decoded with each
// detector (pipeline::CaptureDecoder, channel bits kept) and scored against the truth
// (score.hpp). Work is split by (detector, entry) over a pool of threads; results come
// back in a fixed order (detectors as asked, entries as listed), so the numbers do not
// depend on the number of threads (only the throughput does).

#include <filesystem>
#include <functional>
#include <optional>
#include <string>
#include <vector>

#include "compare/corpus.hpp"
#include "compare/score.hpp"
#include "detect/plugin_host.hpp"
#include "pipeline/capture_decoder.hpp"

namespace salvor::compare {

struct CompareOptions {
  std::vector<std::string> detectors;          // plugin names, in report order
  pipeline::DecodeSettings settings;           // base settings; detector and keep_channel_bits are set per run
  unsigned threads = 0;                        // 0 = all cores
  // When set, each (detector, entry) decode is also written as a decode folder
  // <keep_decodes>/<detector>/<entry>/ (image.bin, sectors.jsonl, damage map, run.json).
  std::optional<std::filesystem::path> keep_decodes;
  std::function<void(size_t done, size_t total)> progress;  // serialised; may be empty
};

struct CompareResult {
  std::vector<std::string> detectors;
  std::vector<EntryScore> scores;  // detector-major: scores[d * entries + e]
  const EntryScore& at(size_t detector, size_t entry, size_t entries) const { return scores.at(detector * entries + entry); }
  uint64_t silent_errors() const;
};

// The loadable detectors whose declared target the pipeline can equalize towards, in load order.
std::vector<std::string> comparable_detectors(const detect::PluginHost& host);

// Throws salvor::Error(usage) for an unknown detector, (input) for a bad corpus entry.
CompareResult run_compare(const Corpus& corpus, const detect::PluginHost& host, const CompareOptions& options);

}  // namespace salvor::compare
