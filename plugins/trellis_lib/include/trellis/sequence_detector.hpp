#pragma once
// Sliding-window Viterbi detector over a Trellis, with three branch metrics:
//
//  euclidean          (y_k - yhat)^2: maximum-likelihood sequence detection in white
//                     Gaussian noise (A. J. Viterbi, IEEE Trans. IT-13(2):260-269, 1967;
//                     G. D. Forney, Proc. IEEE 61(3):268-278, 1973).
//  noise_predictive   (y_k - yhat - sum_i p_i n~_(k-i))^2 with n~ taken from each survivor's
//                     own past decisions (Coker, Eleftheriou, Galbraith & Hirt, "Noise-
//                     predictive maximum likelihood (NPML) detection", IEEE Trans. Magn.
//                     34(1):110-117, 1998).
//  pattern_dependent  ln s2(c) + (y_k - yhat - b(c) - sum_i p_i(c) n~_(k-i))^2 / s2(c) for
//                     the branch's data pattern c (Kavcic & Moura, IEEE Trans. IT
//                     46(1):291-301, 2000; Moon & Park, IEEE JSAC 19(4):730-743, 2001).
//
// Per-bit reliabilities follow the soft-output Viterbi algorithm of Hagenauer & Hoeher
// ("A Viterbi algorithm with soft-decision outputs and its applications", GLOBECOM 1989):
// at every step of the final survivor the metric difference Delta to the competing path
// is kept, and every NRZI bit within `reliability_window` steps back on which the
// competitor disagrees has its reliability lowered to Delta. Metrics are -2 ln p(y|path)
// up to constants scaled by 2 s2, so LLR = Delta / (2 s2) (Delta / 2 for the
// pattern-dependent metric, whose variances are inside it).
//
// Streaming: decisions are packed one bit per state, kept in a window of kWindow = 512
// steps. When the window is full, the best survivor is traced back and all but the newest
// traceback_depth steps are released (block traceback: 512 - depth bits per traceback,
// each of them at least depth steps behind the end of the window); so at most 511 bits
// are held back (1583 with segments, below). The traceback costs two instructions per step (trace_levels). The
// add-compare-select runs through the kernels of trellis/kernels.hpp, the minimum
// subtracted after every 8th step of the span: the Euclidean metric in 16-bit fixed point
// by default (fixed_point), the noise-model metrics in float; noise models are estimated
// in double. A span starts with every state equally likely (no assumption about the
// levels before the first sample) and flush() traces back from the best final state.
// Block boundaries depend only on the step count, so any chunking of the input gives the
// same bits and LLRs.
//
// Segments (parallel_segments, the fixed-point Euclidean metric at 8 or 16 states): the
// span is cut into segments of 2 H = 1056 steps. A segment after the first starts with
// every state equally likely W steps before its first bit (W = traceback_depth rounded
// up to a multiple of the phase period, fixed_dual_period), and its survivor is traced
// back from W steps past its last bit, along the decisions of the trellis that continues
// it; so every released bit still has at least `traceback_depth` steps on either side
// (the sliding-block decoding of Fettweis & Meyr, "High-speed parallel Viterbi decoding",
// IEEE Commun. Mag. 29(5):46-55, 1991). The second half of one segment and the start of
// the next run side by side in one vector: about 1.5 times the throughput at 16 states.
// The bits can differ from one trellis over the span where survivors had not merged
// within W steps; the error rates are the same (tested). A segment releases 2 H bits;
// at most 3 H - 1 are held back. Cuts depend only on the step count.
//
// When noise_sigma is not known, s2 is estimated from the decided path: the mean square
// of (y - yhat) (euclidean) or of the prediction error (noise-predictive, untrained),
// accumulated over everything released since the last reset().

#include <cstdint>
#include <span>
#include <string>
#include <vector>

#include "common/stream.hpp"
#include "trellis/kernels.hpp"
#include "trellis/noise_model.hpp"
#include "trellis/trellis.hpp"

namespace salvor::trellis {

enum class MetricKind { euclidean, noise_predictive, pattern_dependent };

struct SequenceDetectorConfig {
  MetricKind kind = MetricKind::euclidean;
  int traceback_depth = 64;     // bits; 8..256: the newest steps a traceback does not release
  bool reliability = true;      // compute SOVA reliabilities (else |LLR| = a fixed estimate)
  int reliability_window = 32;  // steps back from a merge that it may update; 1..traceback_depth
  double noise_sigma = 0.0;     // rms noise at the input; <= 0: estimate (see above)
  int predictor_order = 2;      // noise_predictive 1..4, pattern_dependent 0..4
  int pattern_bits = 3;         // pattern_dependent: levels x_k..x_(k-P+1) in a pattern, 1..6
  bool adapt = false;           // noise models: estimate from decisions while untrained
  size_t adapt_min_samples = 2048;  // decided samples before the first adapted model
  // Run the add-compare-select and the SOVA update with the run-time dispatched SIMD
  // kernels (true) or their scalar references (false). Both give the same bits and LLRs.
  bool simd = true;
  // Euclidean metric only: the add-compare-select in 16-bit fixed point (see
  // trellis/kernels.hpp: samples quantized to 1/85 of the largest noiseless output),
  // about twice as fast as float. false: float, the reference it is tested against.
  bool fixed_point = true;
  // Fixed-point Euclidean metric at 8 or 16 states: cut the span into segments decoded two
  // at a time in one vector (viterbi_fixed_dual_simd; see "Segments" above). false: one
  // trellis over the whole span, the reference the segments are tested against.
  bool parallel_segments = true;
};

class SequenceDetector {
 public:
  static constexpr float kLlrCap = 60.0f;  // |LLR| saturation (no competitor seen)
  static constexpr int kMaxTraceback = 256;
  static constexpr size_t kWindow = 2 * kMaxTraceback;  // steps per traceback
  // H: a multiple of the phase periods of 8 and 16 states (24 and 8 steps), and at least
  // twice the largest look-ahead W (kMaxTraceback rounded up to 24: 264).
  static constexpr size_t kSegmentHalf = 528;
  static_assert(kSegmentHalf % 24 == 0 && kSegmentHalf >= 2 * ((kMaxTraceback + 23) / 24 * 24));
  static constexpr size_t kMaxHeldBack = 3 * kSegmentHalf - 1;  // any configuration

  SequenceDetector(std::span<const double> target, const SequenceDetectorConfig& config);

  // Learn the noise model from samples whose NRZI bits are known; `level_before` is the
  // written level (+1/-1) before bit 0. Accumulates over calls. Euclidean: no-op.
  void train(std::span<const float> samples, std::span<const uint8_t> known_bits, int level_before);
  bool trained() const { return trained_; }

  // Consumes samples while there is room for what they release. `erasure` is empty or
  // one flag per sample (1 = no information: branch metric 0).
  Progress process(std::span<const float> samples, std::span<const uint8_t> erasure,
                   std::span<uint8_t> bits, std::span<float> llr);
  // Releases every held-back bit (needs held_back() room) and starts a new span.
  size_t flush(std::span<uint8_t> bits, std::span<float> llr);
  // Clears the span and everything estimated from decisions; keeps training.
  void reset();
  size_t held_back() const { return count_ + pending_; }
  size_t max_held_back() const { return segments_ ? 3 * kSegmentHalf - 1 : kWindow - 1; }

  const Trellis& trellis() const { return trellis_; }
  const SequenceDetectorConfig& config() const { return config_; }
  const LinearPredictor& predictor() const { return predictor_; }
  const PatternNoiseModel& pattern_model() const { return pattern_model_; }
  std::string describe() const;

 private:
  // `n` add-compare-select steps on samples already stored in the ring at `slot`.
  void steps_float(size_t slot, size_t n);
  void steps_fixed(size_t slot, size_t n);
  void acs_fixed(size_t slot, size_t n);  // steps_fixed on samples already quantized
  // Segments: stores samples (quantized) after the held ones; the first H steps of a span
  // go through the add-compare-select at once, later ones wait for the next pass.
  size_t store_samples(std::span<const float> samples, std::span<const uint8_t> erasure,
                       size_t from, bool room_for_pass);
  Progress process_segments(std::span<const float> samples, std::span<const uint8_t> erasure,
                            std::span<uint8_t> bits, std::span<float> llr);
  // With the current segment's first H steps done and 2 H samples pending: the rest of it
  // (plus W look-ahead steps) beside the next segment's warm-up and first H steps.
  void segment_pass();
  void start_next_segment();  // after the current segment's release
  void store_run(size_t slot, const float* samples, const uint8_t* erasure, size_t n);
  int best_state() const;
  void install_tables();
  // Traces the survivor through the `n` steps of the window: the NRZI bits of the first
  // `emit` steps, and the states, branches and bits of the first `path_steps`.
  // cut > 0: a segment pass's release, traced as two chains cut at that step from the
  // pass's guess of the survivor there (exact either way).
  void trace_back(size_t n, size_t emit, size_t path_steps, size_t cut);
  void sova(size_t n, size_t emit, double scale);
  void release(size_t emit, std::span<uint8_t> bits, std::span<float> llr, size_t cut = 0);
  void clear_span();
  bool has_noise_model() const { return model_ready_; }
  double llr_scale() const;

  Trellis trellis_;
  SequenceDetectorConfig config_;
  int S_;          // states
  int N_;          // predictor order in use (0 for euclidean)
  size_t window_;   // kWindow
  size_t release_;  // bits released per traceback: kWindow - traceback_depth
  double d2min_;   // for the fixed |LLR| when reliabilities are off

  // Noise models and their estimators.
  bool trained_ = false;
  bool model_ready_ = false;  // a predictor / pattern model is installed
  LinearPredictor predictor_;
  PatternNoiseModel pattern_model_;
  PredictorEstimator np_estimator_;
  PatternPredictorEstimator pd_estimator_;
  std::array<std::vector<uint8_t>, 2> pattern_of_;  // pattern of branch (j, s)

  // Add-compare-select state (structure of arrays over states).
  bool euclidean_ = false;             // kind == euclidean: the Euclidean kernel
  std::vector<float> pmf_;             // path metrics
  std::vector<float> histf_;           // [i * S + s]: survivor noise n_(k-1-i)
  std::vector<float> metric_tables_;   // see install_tables()
  size_t span_steps_ = 0;              // steps since the span began (renormalisation phase)
  std::vector<float> out0f_, out1f_;   // branch outputs in float
  bool fixed_ = false;                 // the fixed-point Euclidean kernel
  FixedAcsTables fixed_tables_;
  std::vector<uint16_t> pmq_;          // its path metrics (state order)
  std::vector<uint8_t> fixed_lane_;    // [phase * S + s]: lane of state s (fixed_lane_of)
  TraceWordTable trace_table_;         // state-ordered decisions <-> traceback words

  // Window of the last `count_` steps, a ring starting at `head_`.
  std::vector<uint32_t> decisions_;  // bit s: branch index into state s (float kernels)
  std::vector<uint64_t> trace_dec_;  // the same in trace_levels' format (every kernel)
  std::vector<float> delta_;         // [slot * S + s]: |metric difference| at the merge
  std::vector<uint16_t> deltaq_;     // fixed point: [slot * S + lane], in metric quanta
  std::vector<float> y_;
  std::vector<int16_t> yq_;          // fixed point: quantized samples
  std::vector<uint8_t> erased_;
  size_t head_ = 0, count_ = 0;
  // Segments: samples stored after the count_ decided steps, not yet through the
  // add-compare-select; the next segment's metrics and its decisions and deltas for the
  // W steps where the ring holds the current segment's look-ahead; the warm-up's.
  bool segments_ = false;
  size_t lookahead_ = 0;  // W
  size_t pending_ = 0;
  int mid_guess_ = 0;
  std::vector<uint16_t> pm_next_;
  std::vector<uint64_t> next_dec_, warm_dec_;
  std::vector<uint16_t> next_delta_, warm_delta_;

  // Traceback scratch (sized to the window).
  std::vector<uint8_t> path_state_, path_branch_, path_bit_;
  static constexpr size_t kPathPad = kMaxTraceback;  // room before step 0 (SOVA kernel)
  std::vector<uint32_t> path_dec_;  // decisions of the window in step order (SOVA)
  std::vector<uint64_t> path_levels_; // the survivor's levels as bits (trace_levels)
  std::vector<uint16_t> path_code_;   // see the constructor
  std::vector<float> path_delta_;   // metric difference at each survivor merge
  std::vector<uint16_t> path_slot_; // ring slot of each step
  std::vector<float> path_rel_;

  // Decided-path history for estimates (kept across blocks of a span).
  std::vector<double> decided_noise_;  // newest first, N_ values
  int decided_valid_ = 0;              // how many of them are real (not span start)
  double residual_sum_ = 0.0;          // sum of squared decided residuals
  size_t residual_count_ = 0;
};

}  // namespace salvor::trellis
