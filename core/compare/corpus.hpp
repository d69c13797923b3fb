#pragma once
// A corpus: captures with ground truth, described by a corpus definition (corpus.json) at
// the top of a corpus folder. Each entry names one simulator output folder (a manifest with
// truth) and the channel parameters it was made with, so results can be plotted against
// SNR and channel density. Schema (corpora/corpus/README.md):
//
//   {"salvor_corpus": 1, "name": "standard", "format": "tf1-512", "description": "...",
//    "entries": [{"name": "base", "folder": "base", "scenario": "scenarios/base.toml",
//                 "seed": 4101, "tracks": "0:0-1", "sweeps": ["density", "snr"],
//                 "density": 2.3, "snr_db": 23.0, "jitter_bits": 0.02,
//                 "jitter_share": 0.03, "damage": "none", "description": "..."}]}
//
// "folder" is relative to the corpus definition; it holds manifest.json.

#include <cstdint>
#include <filesystem>
#include <string>
#include <vector>

namespace salvor::compare {

struct CorpusEntry {
  std::string name;                 // unique within the corpus, [A-Za-z0-9._-]
  std::string description;
  std::filesystem::path manifest;   // <corpus folder>/<folder>/manifest.json
  std::string scenario;             // scenario file the entry was made from (provenance)
  uint64_t seed = 0;
  std::string tracks;               // salvor-synth --tracks text
  std::vector<std::string> sweeps;  // "snr", "density", "jitter", "damage": which plots it belongs to
  double density = 0;               // PW50 / T
  double snr_db = 0;                // salvor's SNR (corpora/scenarios/README.md)
  double jitter_bits = 0;           // sigma_j in bit periods
  double jitter_share = 0;          // share of the noise power that is jitter (model in the definition)
  std::string damage = "none";      // none, scratch, thermal_asperity, defect, weak_head, off_track
  bool in_sweep(const std::string& s) const;
};

struct Corpus {
  std::string name;
  std::string description;
  std::string format;               // descriptor name all entries share
  std::filesystem::path definition; // the corpus.json read
  std::vector<CorpusEntry> entries;
};

// Reads a corpus definition: `path` is the corpus.json file or a folder holding one.
// Throws salvor::Error(input) naming the file and the field on anything malformed, a
// duplicate entry name, or an entry whose manifest.json is missing.
Corpus read_corpus(const std::filesystem::path& path);

}  // namespace salvor::compare
