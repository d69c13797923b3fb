#pragma once
// Soft-output max-log-MAP detector over a Trellis: the BCJR forward-backward algorithm
// (Bahl, Cocke, Jelinek & Raviv, "Optimal decoding of linear codes for minimizing symbol
// error rate", IEEE Trans. IT-20(2):284-287, 1974) in the log domain with max in place
// of log-sum-exp (Robertson, Villebrun & Hoeher, "A comparison of optimal and
// sub-optimal MAP decoding algorithms operating in the log domain", ICC 1995).
//
//   gamma_k(s', s) = -(y_k - yhat(s', s))^2 / (2 s2)        (0 for an erased sample)
//   alpha_k(s)     = max_s' [alpha_(k-1)(s') + gamma_k(s', s)]
//   beta_(k-1)(s') = max_s  [beta_k(s) + gamma_k(s', s)]
//   L(a_k)         = max over branches with a_k = 1 of (alpha + gamma + beta)
//                  - max over branches with a_k = 0 of (alpha + gamma + beta)
// where a_k is the NRZI bit of the branch (x_k != x_(k-1)).
//
// Streaming, in blocks with overlap: the forward recursion runs continuously over the
// span; the backward recursion for a block of `block_length` bits starts `overlap` bits
// beyond the block with all states equal (warm-up) and is exact at the end of a span
// (flush). So at most block_length + overlap - 1 bits are held back. Block boundaries
// depend only on the step count: any chunking gives the same output.
//
// Arithmetic: float, through the kernels of trellis/kernels.hpp.
// Scaling: metrics are computed as -(y - yhat)^2 and the difference is divided by 2 s2
// at the end (max-log decisions do not depend on s2). s2 = noise_sigma^2 if known, else
// the mean square of (y - yhat) on the best branch of each released step, accumulated
// since the last reset().

#include <cstdint>
#include <span>
#include <string>
#include <vector>

#include "common/stream.hpp"
#include "trellis/trellis.hpp"

namespace salvor::trellis {

struct MaxLogMapConfig {
  int block_length = 256;   // bits released per block; 16..4096
  int overlap = 64;         // backward warm-up bits; 0..1024 (0: every block ends "open")
  double noise_sigma = 0.0; // rms noise at the input; <= 0: estimate (see above)
  // Run the recursions with the run-time dispatched SIMD kernels (true) or their scalar
  // references (false); both give the same bits and LLRs.
  bool simd = true;
};

class MaxLogMap {
 public:
  static constexpr float kLlrCap = 60.0f;
  static constexpr int kMaxBlock = 4096;
  static constexpr int kMaxOverlap = 1024;

  MaxLogMap(std::span<const double> target, const MaxLogMapConfig& config);

  Progress process(std::span<const float> samples, std::span<const uint8_t> erasure,
                   std::span<uint8_t> bits, std::span<float> llr);
  size_t flush(std::span<uint8_t> bits, std::span<float> llr);
  void reset();
  size_t held_back() const { return count_; }
  size_t max_held_back() const {
    return static_cast<size_t>(config_.block_length + config_.overlap) - 1;
  }
  const Trellis& trellis() const { return trellis_; }
  std::string describe() const;

 private:
  void run(size_t emit, size_t total, std::span<uint8_t> bits, std::span<float> llr);
  void clear_span();

  Trellis trellis_;
  MaxLogMapConfig config_;
  int S_;
  size_t capacity_;  // block + overlap samples

  std::vector<float> y_;         // ring of buffered samples
  std::vector<uint8_t> erased_;
  size_t head_ = 0, count_ = 0;

  std::vector<float> alpha_start_;  // forward metrics before the first buffered sample
  std::vector<float> alpha_;        // [t * S + s] after step t of the block
  std::vector<float> beta_;
  std::vector<float> beta_kept_;    // backward metrics of the block's second half (forward_backward kernel)
  std::vector<float> raw_;          // unscaled LLR differences of the block
  std::vector<uint16_t> best_branch_;  // j * S + s of the best branch per step
  std::vector<float> y_lin_;        // the buffered samples in step order
  std::vector<uint8_t> erased_lin_;
  std::vector<float> out0f_, out1f_;
  std::vector<uint8_t> nrzi0_, nrzi1_;

  double residual_sum_ = 0.0;
  size_t residual_count_ = 0;
};

}  // namespace salvor::trellis
