#pragma once
// The baseline high-pass (a biquad) and the AGC's running mean square (a one-pole average)
// are recursions: sample by sample, each output waits for the one before (about 9 cycles a
// sample here). Written for blocks of kBlock samples instead, every output of a block is a
// fixed linear combination of the state at the block's start and the block's inputs
// ("look-ahead" or block-state form of a recursive filter: C. W. Barnes & S. Shinnaka,
// "Block-shift invariance and block implementation of discrete-time filters", IEEE Trans.
// Circuits and Systems 27(8), 1980 [memory]; K. K. Parhi & D. G. Messerschmitt, "Pipeline
// interleaving and parallelism in recursive digital filters", IEEE Trans. ASSP 37(7), 1989
// [memory]). The kBlock outputs then come out of one vector each, and only the state, once
// per block, stays on the serial path.
//
// Same results whatever the chunking and the SIMD target. Blocks are counted from the
// stream's first sample. Each lane's sum runs in one fixed order (the table's rows j = 0..7,
// then the state terms), the same on every target and in the scalar helpers below, so a
// block computed in pieces (a call that ends inside it) gives the bits a whole block gives.
// The translation unit and its callers are compiled with -ffp-contract=off, so that no
// multiply and add are fused differently in one place than in another.
//
// Against the plain recursion the results differ by rounding only (~1e-16 relative in the
// double-precision state); tests/condition bound it.
//
// Outputs are clamped to the float range before the conversion, on every path: SIMD
// targets differ in what they make of a double beyond it (infinity or the largest float).

#include <cmath>
#include <cstddef>
#include <cstdint>

namespace salvor::block_recursions {

constexpr size_t kBlock = 8;

// y_i = sum_j h[j][i] x_j (h[j][i] = 0 for j > i) + p1[i] s1 + p2[i] s2, i = 0..7, for the
// transposed direct form II biquad y = b0 x + s1, s1' = b1 x - a1 y + s2, s2' = b2 x - a2 y.
// The state after the block: s' = Q s + sum_j g[j] x_j, with Q = A^8 (A the state matrix).
struct BiquadBlockTables {
  alignas(64) double h[kBlock][kBlock];
  alignas(64) double p1[kBlock];
  alignas(64) double p2[kBlock];
  alignas(64) double g1[kBlock];  // first state component's input weights
  alignas(64) double g2[kBlock];
  double q11 = 0, q12 = 0, q21 = 0, q22 = 0;
};
BiquadBlockTables biquad_block_tables(double b0, double b1, double b2, double a1, double a2);

inline float to_float_clamped(double v) {
  constexpr double kMax = 3.4028234663852886e38;  // FLT_MAX
  return static_cast<float>(v < -kMax ? -kMax : v > kMax ? kMax : v);
}

// Output lane i of a block from its first i + 1 inputs (the scalar form of the kernel's lane).
inline double biquad_lane(const BiquadBlockTables& t, const double* x, size_t i, double s1, double s2) {
  double acc = t.h[0][i] * x[0];
  for (size_t j = 1; j <= i; ++j) acc = acc + t.h[j][i] * x[j];
  acc = acc + t.p1[i] * s1;
  return acc + t.p2[i] * s2;
}

// The state after a whole block x[0..7].
inline void biquad_next_state(const BiquadBlockTables& t, const double* x, double& s1, double& s2) {
  double u1 = t.g1[0] * x[0], u2 = t.g2[0] * x[0];
  for (size_t j = 1; j < kBlock; ++j) {
    u1 = u1 + t.g1[j] * x[j];
    u2 = u2 + t.g2[j] * x[j];
  }
  const double n1 = (u1 + t.q11 * s1) + t.q12 * s2;
  const double n2 = (u2 + t.q21 * s1) + t.q22 * s2;
  s1 = n1;
  s2 = n2;
}

// Whole blocks: x and y hold blocks * kBlock samples; (s1, s2) is the state at the first
// block's start and is left at the last block's end.
void biquad_blocks(const BiquadBlockTables& t, const float* x, float* y, size_t blocks, double& s1, double& s2);

// A one-pole average that only some samples update (the AGC's mean square), with its
// bias-correcting weight:
//   acc_k = r acc_(k-1) + alpha v_k,  weight_k = r weight_(k-1) + alpha   (updating samples).
// Within a block whose samples so far all updated, lane i is
//   acc_i = r^i (sum_{j<=i} alpha r^-j v_j) + r^(i+1) acc,  weight_i = alpha (1 + .. + r^i) + r^(i+1) weight,
// with (acc, weight) at the block's start: one addition per sample waits for the one before,
// where the recursion waits for a multiply and an add. After the first sample of a block
// that does not update, the block continues with the recursion.
struct AverageBlockTables {
  alignas(64) double c[kBlock][kBlock];  // c[j][i] = alpha r^-j for i >= j, else 0
  alignas(64) double r_i[kBlock];        // r^i
  alignas(64) double r_next[kBlock];     // r^(i+1)
  alignas(64) double w_add[kBlock];      // alpha (1 + ... + r^i)
  double alpha = 0.0, retain = 1.0;
};
AverageBlockTables average_block_tables(double alpha, double retain);

// The running sum of lane i from that of lane i - 1 (0 before lane 0), and lane i's values.
inline double lane_sum(const AverageBlockTables& t, double sum_before, size_t i, double v) {
  return i == 0 ? t.c[0][0] * v : sum_before + t.c[i][i] * v;
}
inline double lane_acc(const AverageBlockTables& t, double sum, size_t i, double acc) {
  return t.r_i[i] * sum + t.r_next[i] * acc;
}
inline double lane_weight(const AverageBlockTables& t, size_t i, double weight) {
  return t.w_add[i] + t.r_next[i] * weight;
}

// The average's state and its place in the block, stepped once per sample.
class BlockAverage {
 public:
  void reset() { *this = BlockAverage{}; }
  // v: this sample's value; update: whether it updates the average.
  void step(const AverageBlockTables& t, bool update, double v) {
    if (fill_ == 0) {
      block_acc_ = acc;
      block_weight_ = weight;
      prefix_ = true;
    }
    if (update && prefix_) {
      sum_ = lane_sum(t, sum_, fill_, v);
      acc = lane_acc(t, sum_, fill_, block_acc_);
      weight = lane_weight(t, fill_, block_weight_);
    } else {
      prefix_ = false;
      if (update) {
        acc = t.retain * acc + t.alpha * v;
        weight = t.retain * weight + t.alpha;
      }
    }
    if (++fill_ == kBlock) fill_ = 0;
  }
  bool at_block_start() const { return fill_ == 0; }
  double acc = 0.0, weight = 0.0;  // as after the newest sample

 private:
  double block_acc_ = 0.0, block_weight_ = 0.0;  // at the current block's start
  double sum_ = 0.0;                              // lane sum so far
  size_t fill_ = 0;                               // samples of the current block so far
  bool prefix_ = true;                            // all of them updated
};

// gain = acc > 0 ? min(max_gain, reference sqrt(weight / acc)) : max_gain
inline double agc_gain(double acc, double weight, double reference, double max_gain) {
  if (!(acc > 0.0)) return max_gain;
  const double g = reference * std::sqrt(weight / acc);
  return g < max_gain ? g : max_gain;
}

// The AGC over whole blocks in which every sample updates, the average at a block start
// (a.at_block_start()): out_i = x_i gain_i, with v = x^2; `gain` as after the last sample.
void agc_blocks(const AverageBlockTables& t, const float* x, float* y, size_t blocks, BlockAverage& a,
                double reference, double max_gain, double& gain);

}  // namespace salvor::block_recursions
