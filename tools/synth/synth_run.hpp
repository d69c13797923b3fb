#pragma once
// Runs a scenario: encodes the image into channel bits with the reference track encoder
// (core/format), renders every selected track and revolution, and writes the output folder:
//
//   DIR/manifest.json           DEVELOPERS.md schema; written last (its presence = complete)
//   DIR/format.toml             byte copy of the descriptor used
//   DIR/captures/cCCC-hH-rR.*   one capture per revolution, sidecar beside it
//   DIR/truth/image.bin         the image that was encoded
//   DIR/truth/damage.json       every damaged sector of every capture, and head-wide conditions
//   DIR/truth/bits/cCCC-hH.bits (--bitstreams) noiseless channel bits of each track, packed
//                               MSB first (bit n of the track is bit 7 - n%8 of byte n/8),
//                               bits_per_track bits, zero-padded to a whole byte; described by
//                               truth/bits/index.json
//
// Each capture covers one revolution: it starts lead_bits bit periods before the index and
// ends tail_bits after the next index; the rig record in the sidecar gives the fractional
// sample index of the index pulse ("index_sample").

#include <cstdint>
#include <filesystem>
#include <functional>
#include <optional>
#include <string>
#include <utility>
#include <vector>

#include <nlohmann/json.hpp>

#include "synth/scenario.hpp"

namespace salvor::synth {

struct RunOptions {
  std::filesystem::path out;
  std::optional<uint64_t> seed;                 // overrides the scenario's seed
  std::optional<Container> container;           // overrides capture.container
  std::optional<SampleFormat> sample_format;    // overrides capture.sample_format
  std::optional<int> revolutions;               // overrides scenario.revolutions
  std::optional<std::vector<std::pair<int, int>>> tracks;  // (cylinder, head); overrides [tracks]
  bool bitstreams = false;
  bool overwrite = false;                       // replace an earlier synth output in `out`
  size_t chunk_samples = 1 << 16;
  std::function<void(const std::string&)> progress;  // one line per capture; may be empty
};

struct RunSummary {
  std::string scenario;
  uint64_t seed = 0;
  size_t captures = 0;
  uint64_t samples = 0;
  uint64_t bytes = 0;
  size_t damaged_sector_entries = 0;
  std::filesystem::path manifest;
};

RunSummary run_scenario(const Scenario& scenario, const RunOptions& options);

// "3:1,0-2:*,*:0" -> (cylinder, head) pairs, checked against the geometry.
std::vector<std::pair<int, int>> parse_track_list(const std::string& text, int cylinders, int heads);

// Packs 0/1 channel bits MSB first.
std::vector<uint8_t> pack_bits_msb_first(const std::vector<uint8_t>& bits);

}  // namespace salvor::synth
