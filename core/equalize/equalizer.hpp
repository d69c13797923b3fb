#pragma once
// Adaptive FIR equalizer on bit-spaced samples (one sample per channel bit, from the PLL),
// shaping the channel towards a partial-response target f (targets.hpp, mmse_target.hpp).
//
// Literature:
//   Widrow & Hoff, IRE WESCON Conv. Rec. pt. 4, 96-104, 1960 (LMS); Widrow & Stearns,
//   Adaptive Signal Processing, 1985; Haykin, Adaptive Filter Theory (NLMS, stability).
//   Step-size convention used here (no factor 2):  w <- w + mu * e_k * x_k,
//   e_k = d_k - w'x_k,  d_k = (f * a)_k.  Mean-square stability of LMS on a tapped delay
//   line: 0 < mu < 2 / tr(R) = 2 / (N E[x^2]); misadjustment ~ (mu/2) tr(R).
//   NLMS: w <- w + (mu~ / (eps + |x_k|^2)) e_k x_k with 0 < mu~ < 2.
//
// Gain constraint: the target is held fixed while the taps adapt (a fixed polynomial, or a
// monic GPR target designed once from training data), so gain and target cannot drift
// together. Optionally the main tap is held at its initial value as well (fix_main_tap),
// for front ends whose AGC adapts at the same time.
//
// Alignment: the output for position j is y_j = sum_i w_i x_{j+delay-i}. Output j lines up
// with input sample j, so the equalizer holds back `delay` outputs; flush() emits them.
//
// Modes: train() adapts on known levels (preamble, sync mark: d_j from the written levels
// a_j); process() only filters; adapt_decided() adapts later from the detector's decided
// levels for outputs already produced (decision-directed, delayed LMS with the error
// recomputed with the current taps). With freeze_after_training the taps stop moving
// once trained; the error is still measured. Filtering and training are chunking
// invariant; decision-directed outputs depend on when the decisions arrive (as in a
// hardware loop with a fixed latency), so a caller that wants reproducible runs hands
// decisions over at a fixed lag. Decisions for the last outputs of a span (those only
// known after the detector's flush) cannot be applied once flush() has ended the span.
//
// Speed: by default the loops run in SIMD kernels (equalizer_kernels.hpp: Highway with
// run-time dispatch, linear doubled delay lines, double precision as before). Filtering
// (process, flush) equals the scalar reference bit for bit. Training still adapts on every
// sample with the reference's updates, but computes each output from the taps of two
// samples earlier plus the two pending updates' contributions (algebraically the same
// output; the sums round differently), and the running MSE multiplies by 1/time constant
// instead of dividing; outputs, taps and statistics agree with the reference to rounding
// (tests/equalize/test_equalizer_simd.cpp bounds the difference). reference_kernel = true
// selects the plain scalar loops, kept as the reference.

#include <cstddef>
#include <cstdint>
#include <span>
#include <string>
#include <vector>

#include "common/stream.hpp"

namespace salvor::equalize {

struct EqualizerConfig {
  size_t taps = 15;                  // FIR length N, 5..31
  size_t delay = 7;                  // main-tap index (< taps): output j lines up with input j
  std::vector<double> target{1.0, 0.0, -1.0};  // f_0..f_{L-1}, 1..6 taps, not all zero (PR4)
  std::string target_name = "PR4";  // for describe() and reports
  std::vector<double> initial_taps;  // empty: a unit main tap; else exactly `taps` values
  bool normalized = true;            // NLMS (step_size in (0,2)) or plain LMS (step_size > 0)
  double step_size = 0.01;           // mu (LMS) or mu~ (NLMS); convention in the header comment
  double input_power = 0.0;          // E[x^2] if known (> 0): plain LMS step sizes at or above
                                     //   2/(N E[x^2]) are refused at construction
  bool fix_main_tap = false;         // hold w[delay] at its initial value
  bool freeze_after_training = false;  // decision-directed updates only measure the error
  size_t max_decision_latency = 256;   // how many outputs behind decisions may arrive, <= 65536
  double mse_time_constant = 1000.0;   // running MSE: exponential average over ~this many updates
  bool reference_kernel = false;       // true: the scalar reference loops instead of the SIMD kernels
};

struct ErrorStats {
  size_t count = 0;  // error samples measured (training or decision-directed)
  double mse = 0.0;  // mean of e^2 over them (0 when count is 0)
};

class Equalizer {
 public:
  explicit Equalizer(const EqualizerConfig& config);  // validates, throws Error(usage) naming the field

  // Filter only. `erasure` is empty or has in.size() flags; `out` needs in.size() room.
  // Consumes all input; produces one output per input once `delay` samples are buffered.
  Progress process(std::span<const float> in, std::span<float> out, std::span<const uint8_t> erasure = {});

  // Filter and adapt on known written levels a_j (+1/-1; 0 = unknown, no update) for the
  // same positions as `in`. Windows touching an erased sample are not used for adaptation.
  Progress train(std::span<const float> in, std::span<const int8_t> levels, std::span<float> out,
                 std::span<const uint8_t> erasure = {});

  // Decision-directed adaptation: decided levels (+1/-1, 0 = no decision) for outputs
  // first_output .. first_output + levels.size() - 1 (counted from the start of the span).
  // Positions must already have been produced, must not go backwards, and must lie within
  // max_decision_latency of the newest output; otherwise Error(usage).
  void adapt_decided(uint64_t first_output, std::span<const int8_t> levels);

  // End of span: emits the `delay` held-back outputs (input padded with zeros, no
  // adaptation on the padding). The next call starts a new span; taps are kept.
  size_t flush(std::span<float> out);

  void reset();          // new span and the initial taps; settings kept
  void restart_span();   // new span, taps and statistics kept

  const std::vector<double>& taps() const { return w_; }
  const std::vector<double>& target() const { return config_.target; }
  const std::string& target_name() const { return config_.target_name; }
  const EqualizerConfig& config() const { return config_; }
  double running_mse() const { return running_mse_; }  // exponential average of e^2
  ErrorStats total_stats() const;                        // since construction or reset()
  ErrorStats take_span_stats();                          // since the last call; restarts the count
  uint64_t outputs_produced() const { return n_out_; }   // in the current span
  bool trained() const { return trained_; }
  bool adapting() const { return !(config_.freeze_after_training && trained_); }
  std::string describe() const;

 private:
  Progress run(std::span<const float> in, const int8_t* levels, std::span<float> out,
               std::span<const uint8_t> erasure, bool padding);
  double output_at(uint64_t j) const;
  bool window_clean(uint64_t j) const;
  bool desired_at(uint64_t j, double& d) const;
  void adapt_at(uint64_t j, double y, bool allow_update);
  size_t slot(uint64_t n) const { return static_cast<size_t>(n % ring_size_); }
  // SIMD path: kernel state over this object's own buffers (rebuilt per call, so copies
  // of the object stay independent), and the public taps refreshed from the kernel's.
  struct KernelView;
  void load_kernel_state(KernelView& v);
  void store_kernel_state(const KernelView& v);

  EqualizerConfig config_;
  std::vector<double> w_;          // current taps, w_[i] multiplies x_{j+delay-i}
  std::vector<double> w_initial_;  // for reset()
  size_t ring_size_ = 0;           // taps + max latency + target length + margin
  std::vector<double> x_;          // input samples by absolute index (ring)
  std::vector<uint8_t> x_bad_;     // erased / non-finite input flags (ring)
  std::vector<int8_t> level_;      // known or decided levels by position (ring), 0 = unknown
  uint64_t n_in_ = 0;              // samples taken in this span (padding included)
  uint64_t n_out_ = 0;             // outputs produced in this span
  uint64_t next_decision_ = 0;     // lowest position adapt_decided still accepts
  bool trained_ = false;           // train() has adapted at least once
  double running_mse_ = 0.0;
  bool running_started_ = false;
  double span_sum_ = 0.0, total_sum_ = 0.0;
  size_t span_count_ = 0, total_count_ = 0;
  // SIMD path only (equalizer_kernels.hpp): doubled delay lines and reversed, padded taps.
  std::vector<double> line_x_;
  std::vector<uint8_t> line_bad_;
  std::vector<int8_t> line_level_;
  size_t next_slot_ = 0;
  uint64_t last_bad_plus1_ = 0;
  double pending_mu1_ = 0.0, pending_mu2_ = 0.0;  // see LmsKernelState
  std::vector<double> w_rev_, update_mask_, window_mask_;
  size_t padded_taps_ = 0;
};

// The written levels (+1/-1) behind NRZI channel bits (1 = a transition), starting from
// `level_before`, for feeding a detector's decisions to Equalizer::adapt_decided().
std::vector<int8_t> levels_from_nrzi(std::span<const uint8_t> bits, int8_t level_before);

}  // namespace salvor::equalize
