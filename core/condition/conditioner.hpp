#pragma once
// The conditioning chain between the loader and the resampler, in this order:
//   clip detection -> thermal-asperity detection/suppression -> DC/baseline high-pass
//   -> dropout detection -> AGC -> MR-asymmetry correction (off by default).
// Why this order: saturation is judged on the raw values against the loader's full
// scale; a TA must be taken out before the high-pass (which would otherwise ring with
// it) and before any level tracker sees it; dropouts are judged on the baseline-free
// signal before the AGC would lift them; asymmetry is corrected on the normalised
// signal, so its coefficient is relative to the AGC's reference rms.
//
// Output sample i is input sample i (every stage keeps the index; none shifts time).
// Look-ahead stages hold back up to latency() samples; flush() emits them at the end of
// the stream. Each output sample carries a flag byte (FlagKind bits); the flagged spans
// and counters are collected in summary(). Memory is bounded by the configuration.

#include <cstdint>
#include <optional>
#include <span>
#include <string>
#include <vector>

#include "common/stream.hpp"
#include "condition/agc.hpp"
#include "condition/asymmetry.hpp"
#include "condition/baseline_filter.hpp"
#include "condition/clip_detector.hpp"
#include "condition/dropout_detector.hpp"
#include "condition/flags.hpp"
#include "condition/thermal_asperity.hpp"

namespace salvor {

struct ConditionerConfig {
  double sample_rate_hz = 0.0;  // capture sample rate, > 0
  double bit_rate_hz = 0.0;     // nominal or estimated channel bit rate, > 0
  double full_scale = 1.0;      // loader's full-scale sample value (sidecar "full_scale")
  // Stage switches and settings. The samples_per_bit fields are filled in from the two
  // rates, and clip.full_scale from full_scale; values set there are ignored.
  bool detect_clipping = true;
  ClipDetectorConfig clip;
  bool handle_thermal_asperities = true;
  ThermalAsperityConfig thermal_asperity;
  bool remove_baseline = true;
  BaselineFilterConfig baseline;
  bool detect_dropouts = true;
  DropoutDetectorConfig dropout;
  bool normalise_gain = true;
  AgcConfig agc;
  AsymmetryConfig asymmetry;  // mode off by default
};

struct ConditionSummary {
  uint64_t samples = 0;             // input samples seen
  double dc_offset = 0.0;           // mean of the raw input
  uint64_t clipped_samples = 0;     // output samples flagged clipped
  double clipped_fraction = 0.0;    // clipped_samples / samples emitted
  std::vector<FlagSpan> spans;      // closed spans not yet handed over by take_spans()
  double gain = 1.0;                // AGC gain now (1 if the AGC is off)
  double asymmetry_c = 0.0;         // coefficient in use now
};

class Conditioner {
 public:
  explicit Conditioner(const ConditionerConfig& config);
  // Consumes min(in.size(), out.size()) samples and produces as many, less what the
  // look-ahead stages hold back. Throws Error(input) naming the sample on NaN/Inf.
  Progress process(std::span<const float> in, std::span<float> out, std::span<uint8_t> out_flags);
  Progress process(std::span<const float> in, std::span<float> out);
  // End of stream: emits every held-back sample; out must have room for pending().
  Progress flush(std::span<float> out, std::span<uint8_t> out_flags);
  void reset();
  std::string describe() const;

  size_t latency() const;  // most samples ever held back
  uint64_t pending() const { return in_count_ - out_count_; }
  ConditionSummary summary() const;
  // Flagged spans closed since the last call (for streaming consumers).
  std::vector<FlagSpan> take_spans();

 private:
  size_t run_from(int first_stage, const float* x, const uint8_t* f, size_t n, float* out, uint8_t* out_f);
  void account(std::span<const uint8_t> flags);

  ConditionerConfig cfg_;
  std::optional<ClipDetector> clip_;
  std::optional<ThermalAsperityFilter> ta_;
  std::optional<BaselineFilter> hp_;
  std::optional<DropoutDetector> dropout_;
  std::optional<Agc> agc_;
  std::optional<AsymmetryCorrector> asym_;
  std::vector<float> buf_x_[3];
  std::vector<uint8_t> buf_f_[3];
  std::vector<uint8_t> zeros_;
  std::vector<uint8_t> scratch_flags_;
  SpanCollector spans_;
  std::vector<FlagSpan> all_spans_;
  uint64_t in_count_ = 0, out_count_ = 0, clipped_ = 0;
  double dc_sum_ = 0.0;
  bool flushed_ = false;
};

}  // namespace salvor
