#pragma once
// A simulator scenario: which drive format, what image, which tracks, and every channel,
// rig and damage parameter, read from a TOML file (keys documented in
// corpora/scenarios/README.md). Unknown keys are refused, so a typo never silently falls
// back to a default.

#include <cstdint>
#include <filesystem>
#include <optional>
#include <string>
#include <utility>
#include <vector>

#include <nlohmann/json.hpp>

#include "synth/digitizer.hpp"
#include "synth/pulse.hpp"
#include "synth/renderer.hpp"
#include "synth/writers.hpp"

namespace salvor::synth {

struct ScratchSpec {
  int head = 0;
  int first_cylinder = 0, last_cylinder = 0;  // inclusive band of tracks
  double start_deg = 0;            // angle of the scratch on first_cylinder, from the index
  double length_deg = 1;
  double skew_deg_per_cylinder = 0;  // a straight scratch is not radial: it shifts per track
  double depth = 0.9;              // fraction of the amplitude lost in the middle
  double edge_bits = 100;          // raised-cosine edges
};

struct AsperitySpec {
  int cylinder = 0, head = 0;
  double position_deg = 0;
  double amplitude = 1.0;          // baseline jump, units of A
  double rise_bits = 4;
  double decay_bits = 300;
  std::vector<int> revolutions;    // empty: every revolution
};

struct DefectSpec {
  int cylinder = 0, head = 0;
  double start_deg = 0, length_deg = 0.5;
  double noise_rms = 0.3;          // units of A
};

struct WeakHeadSpec {
  int head = 0;
  double snr_loss_db = 3;          // electronic SNR lower by this much
  double amplitude_factor = 1.0;   // and the signal weaker by this factor
};

struct OfftrackSpec {
  double fraction = 0;             // fraction of the neighbour's readback added
  int side = 1;                    // +1: neighbour is cylinder + 1 (cylinder - 1 at the last)
  std::vector<int> heads;          // empty: every head
};

struct SpindleSpec {
  double offset_ppm = 0;           // mean speed offset of every revolution
  double revolution_sigma_ppm = 0; // plus an independent N(0, sigma^2) per revolution
  double drift_ppm = 0;            // amplitude of the slow sinusoidal drift
  double drift_period_revolutions = 3.0;
};

struct Scenario {
  std::string name;
  std::string description;
  std::filesystem::path source;    // the TOML file
  std::string format;              // descriptor name or path (relative to the scenario)
  uint64_t seed = 1;
  int revolutions = 1;
  std::string image = "random";    // "survey-archive", "random", "zeros"
  // Tracks: cylinders first..last (inclusive, -1 = all), heads list (empty = all).
  int first_cylinder = -1, last_cylinder = -1;
  std::vector<int> heads;

  // capture
  Container container = Container::flac;
  SampleFormat sample_format = SampleFormat::int16;
  std::optional<double> samples_per_bit;   // exactly one of these two
  std::optional<double> sample_rate_hz;
  double full_scale = 2.0;
  double lead_bits = 1000;
  double tail_bits = 1000;

  // channel
  PulseModel model = PulseModel::lorentzian;
  double density = 2.0;
  double span_widths = 10;
  double amplitude = 1.0;
  std::optional<double> snr_db;
  MediaNoise media;
  FrontEnd front_end;
  SpindleSpec spindle;
  OfftrackSpec offtrack;

  std::vector<ScratchSpec> scratches;
  std::vector<AsperitySpec> asperities;
  std::vector<DefectSpec> defects;
  std::vector<WeakHeadSpec> weak_heads;
};

Scenario load_scenario(const std::filesystem::path& path);
Scenario parse_scenario(const std::string& toml_text, const std::filesystem::path& origin);

// A scenario name ("demo") from the source or install tree, or a path to a TOML file.
std::filesystem::path find_scenario(const std::string& name_or_path);

// Everything in the scenario, as JSON (for sidecars and the manifest).
nlohmann::json scenario_json(const Scenario& s);

}  // namespace salvor::synth
