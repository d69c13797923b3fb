#pragma once
// Inner loops of the trellis detectors in float, each in two implementations that give
// bit-identical results: a plain scalar reference and a SIMD kernel (Google Highway,
// dispatched at run time to the best instruction set of the machine). Both perform the
// same float operations in the same order per state (no fused multiply-add: the library
// is built with -ffp-contract=off), so the tests compare them for exact equality.
//
// State layout is the Trellis's: predecessors of state s are s >> 1 (branch 0) and
// (s >> 1) + S/2 (branch 1), so the add-compare-select reads two contiguous halves.

#include <cstddef>
#include <cstdint>
#include <vector>

namespace salvor::trellis {

// Path metrics are renormalised (for Viterbi the minimum subtracted) after every
// kRenormInterval-th step only: the horizontal minimum is the longest part of a step's
// dependency chain, and float metrics that grow for 8 steps keep ample precision.
inline constexpr size_t kRenormInterval = 8;

// Viterbi add-compare-select with the Euclidean branch metric (y - out)^2, for `n`
// steps. Path metrics `pm` (S floats) are updated in place; `phase` is the number of
// steps of the span before y[0], and the minimum is subtracted after step k when
// (phase + k + 1) is a multiple of kRenormInterval. Per step: `decisions[k]` bit s =
// branch taken into state s (1 only if strictly better: ties keep branch 0); if `delta`
// is not null,
// delta[k * S + s] = |metric through branch 0 - metric through branch 1|. An erased
// step (`erased` not null and erased[k] != 0) has branch metric 0.
struct EuclideanAcs {
  int states = 0;               // 2..32, a power of two
  const float* out0 = nullptr;  // noiseless output of branch 0 into state s
  const float* out1 = nullptr;  // ... of branch 1
};
void viterbi_euclidean_scalar(const EuclideanAcs& t, float* pm, size_t phase, const float* y,
                              const uint8_t* erased, size_t n, uint32_t* decisions,
                              float* delta);
void viterbi_euclidean_simd(const EuclideanAcs& t, float* pm, size_t phase, const float* y,
                            const uint8_t* erased, size_t n, uint32_t* decisions, float* delta);

// ---- Fixed-point Euclidean add-compare-select -------------------------------------
// The default Viterbi path. Samples are quantized once, y_q = nearest(clamp(y * gain,
// -limit, limit)) with gain = 85 / (largest |branch output|) and limit = 170, outputs the
// same way (|o_q| <= 85), so |y_q - o_q| <= 255 and the branch metric
//   bm = (y_q - o_q)^2 >> 4            (0 .. 4064; 0 for an erased step)
// needs no clamp. Quantized samples and outputs are stored times 64 (kFixedScale): then
// bm is the high half of the 16-bit product of their difference with itself, one
// instruction. Path metrics are uint16 with saturating adds, the minimum subtracted
// after every kRenormInterval-th step: the spread of the metrics never exceeds
// memory * 4064 (every state is reachable from the best one in `memory` steps), so before
// a renormalisation they stay below (5 + 8) * 4064 < 65535 and never saturate.
// One quantum of a metric is 16 / gain^2 in the float metric's units.
//
// Ties: the branch whose oldest level differs from the newest level of the new state s
// wins (branch 1 - (s & 1)); a rule that the SIMD layout below gets for free.
//
// SIMD layout ("in-place butterflies"): lane l holds one state, and the two predecessors
// of the pair of new states in lanes l and l ^ d are in those same lanes, with d =
// 2^(memory - 1 - p) at layout phase p = (step index in the span) mod memory. The lanes'
// states rotate with the phase (fixed_lane_state); per-state outputs such as delta are
// stored in lane order, so read them through fixed_lane_of().
//
// Decisions are written for the traceback (trace_levels): bit r of the word is the branch
// into the state whose bit-reverse (over `memory` bits) is r, and the S-bit word is
// repeated to fill 64 bits.
inline constexpr int kFixedOutputRange = 85;
inline constexpr int kFixedSampleLimit = 170;
inline constexpr int kFixedMetricShift = 4;
inline constexpr int kFixedScaleShift = 6;
inline constexpr int kFixedScale = 1 << kFixedScaleShift;  // (64 e)^2 >> 16 = e^2 >> 4

struct FixedAcsTables {
  int states = 0, memory = 0;
  float gain = 0.0f;                 // y_q = nearest(clamp(y * gain, -170, 170))
  float metric_unit = 0.0f;          // one metric quantum in float metric units (16 / gain^2)
  std::vector<int16_t> out[2];       // quantized outputs of branch j into state s, times 64
  // Per phase p (memory rows of S): the state in lane l after a step of phase p, and the
  // outputs of the branch from the lane's own predecessor and from its partner's.
  std::vector<uint8_t> lane_state;
  std::vector<int16_t> own_out, partner_out;
  std::vector<int16_t> own_out2, partner_out2;  // [p * 2S + i] = [p * S + i % S]
  // Per phase p and byte b of the lane-ordered "partner chosen" mask: that byte's part
  // of the traceback word (branch bits in bit-reversed state order, repeated to 64 bits).
  std::vector<uint64_t> trace_word;  // [(p * bytes + b) * 256 + value]
  int mask_bytes = 0;
};
FixedAcsTables make_fixed_acs(int memory, const double* out0, const double* out1);

// Lane of state s after a step of layout phase p (the inverse of lane_state).
inline int fixed_lane_of(int state, int phase, int memory) {
  // After phase p, lane bit (memory-1-p) holds state bit 0 and the lane bits above it in
  // rotation hold state bits 1.. : the lane index is the state rotated right by p + 1.
  const int r = (phase + 1) % memory, mask = (1 << memory) - 1;
  return ((state >> r) | (state << (memory - r))) & mask;
}

// 64 y_q for n samples (erased samples give 0; the caller skips their metrics anyway).
void quantize_samples_scalar(const FixedAcsTables& t, const float* y, size_t n, int16_t* yq);
void quantize_samples_simd(const FixedAcsTables& t, const float* y, size_t n, int16_t* yq);

// `n` steps from span step `step0` (layout phase step0 % memory, renormalisation after
// steps with (step0 + k + 1) % kRenormInterval == 0). `pm` holds S metrics in state order
// on entry and exit. decisions[k] as above; if `delta` is not null, delta[k * S + lane] =
// |metric through branch 0 - metric through branch 1| of the state in that lane.
void viterbi_fixed_scalar(const FixedAcsTables& t, uint16_t* pm, size_t step0,
                          const int16_t* yq, const uint8_t* erased, size_t n,
                          uint64_t* decisions, uint16_t* delta);
void viterbi_fixed_simd(const FixedAcsTables& t, uint16_t* pm, size_t step0,
                        const int16_t* yq, const uint8_t* erased, size_t n,
                        uint64_t* decisions, uint16_t* delta);

// Two independent runs of the fixed-point kernel side by side: for 8 and 16 states the
// SIMD kernel holds both trellises in one vector of twice the width (on AVX-512, 16
// states x 2 x uint16 = 512 bits), so one instruction stream does the work of two. Each
// lane is exactly viterbi_fixed_* over its own metrics, samples, erasures, decisions and
// deltas (`delta` set in both lanes or in neither); the scalar reference is two calls of
// viterbi_fixed_scalar. Both lanes step through the same layout and renormalisation
// phases: their span steps must agree modulo fixed_dual_period(memory), and `step0` is
// either of them. Other state counts run the single kernel twice.
struct FixedLane {
  uint16_t* pm = nullptr;             // S metrics in state order, in/out
  const int16_t* yq = nullptr;        // n quantized samples
  const uint8_t* erased = nullptr;    // n flags or null
  uint64_t* decisions = nullptr;      // n traceback words
  uint16_t* delta = nullptr;          // n * S lane-ordered deltas, or null
};
// lcm(memory, kRenormInterval): the period of the layout and renormalisation phases.
inline constexpr size_t fixed_dual_period(int memory) {
  return memory == 3 ? 24 : memory == 5 ? 40 : kRenormInterval;
}
// Throws std::invalid_argument unless delta is given for both lanes or for neither.
void check_dual_lanes(const FixedLane& a, const FixedLane& b);
void viterbi_fixed_dual_scalar(const FixedAcsTables& t, size_t step0, size_t n, const FixedLane& a,
                               const FixedLane& b);
void viterbi_fixed_dual_simd(const FixedAcsTables& t, size_t step0, size_t n, const FixedLane& a,
                             const FixedLane& b);

// ---- Traceback -----------------------------------------------------------------------
// Follows the survivor that ends in `state` after step n-1 back to step 0, given the
// decision words of trace_levels' format (see above) for steps 0..n-1. Writes the levels
// of that path as bits: bit i of levels[] (word i / 64, bit i % 64) is the level
// x_(i - memory) (1 = +1), for i = 0 .. n + memory - 1; so after step t the state is the
// levels at bits t + 1 .. t + memory and the branch taken into it is bit t.
// One bit test and one add with carry per step: the serial chain is two instructions.
// `levels` needs (n + memory + 63) / 64 words.
void trace_levels(const uint64_t* decisions, size_t n, int memory, int state, uint64_t* levels);
// The same with the words in a ring: step t's word at ring[(head + t) % ring_size].
void trace_levels_ring(const uint64_t* ring, size_t ring_size, size_t head, size_t n,
                       int memory, int state, uint64_t* levels);

// The same trace as two chains side by side, exact whatever the guess: the steps from n-1
// down to `mid` from `state`, and the steps below `mid` from `mid_guess`, a guess of the
// survivor's state after step mid - 1 (for a Viterbi detector, the best state there).
// Where the first chain arrives at another state, the part below `mid` is traced again
// from it. Returns whether the guess held.
bool trace_levels_split(const uint64_t* decisions, size_t n, int memory, int state, size_t mid,
                        int mid_guess, uint64_t* levels);

// State-ordered decision words (bit s = branch into state s) in trace_levels' format.
struct TraceWordTable {
  int memory = 0;
  std::vector<uint64_t> table;  // [byte * 256 + value]
  explicit TraceWordTable(int memory_);
  uint64_t operator()(uint32_t state_bits) const {
    uint64_t w = 0;
    for (int b = 0; b < ((1 << memory) + 7) / 8; ++b)
      w |= table[b * 256 + ((state_bits >> (8 * b)) & 0xff)];
    return w;
  }
};
// The other way: trace_levels' word back to bit s = branch into state s.
uint32_t state_ordered_decisions(uint64_t trace_word, int memory);

// Viterbi add-compare-select with a noise-predictive, pattern-dependent branch metric:
// for branch j into state s from predecessor p,
//   e      = ((y - out_j[s]) - bias_j[s]) - coef_j[0][s] h[0][p] - coef_j[1][s] h[1][p] ...
//   metric = log_var_j[s] + (e * e) * inv_var_j[s]          (0 for an erased step)
// where h[i][p] is the survivor noise n_(k-1-i) of p; the survivor taken into s gets
// h'[0][s] = y - out (0 when erased) and h'[i][s] = h[i-1][p]. Tables are [i * S + s]
// for coef and S floats otherwise; NPML is bias 0, log_var 0, inv_var 1 and the same
// coefficients for every branch; with coefficients 0 it is the Euclidean metric.
// Path metrics, decisions, delta and renormalisation as for the Euclidean kernel.
inline constexpr int kMaxOrder = 4;
struct PredictiveAcs {
  int states = 0;
  int order = 0;  // 0..kMaxOrder
  const float* out[2] = {nullptr, nullptr};
  const float* bias[2] = {nullptr, nullptr};
  const float* coef[2] = {nullptr, nullptr};
  const float* log_var[2] = {nullptr, nullptr};
  const float* inv_var[2] = {nullptr, nullptr};
};
void viterbi_predictive_scalar(const PredictiveAcs& t, float* pm, float* hist, size_t phase,
                               const float* y, const uint8_t* erased, size_t n,
                               uint32_t* decisions, float* delta);
void viterbi_predictive_simd(const PredictiveAcs& t, float* pm, float* hist, size_t phase,
                             const float* y, const uint8_t* erased, size_t n,
                             uint32_t* decisions, float* delta);

// Max-log-MAP recursions with gamma = -(y - out)^2 (0 when erased), renormalised after
// steps k (of the call) with (k + 1) a multiple of kRenormInterval, and after the last:
// state 0's metric is subtracted from all (any common offset cancels in the LLR, and a
// broadcast is much shorter on the recursion's dependency chain than a maximum).
//  forward:  alpha_out[k * S + s] = max(alpha_(k-1)[s>>1] + g0, alpha_(k-1)[(s>>1)+S/2] + g1),
//            starting from `alpha_in`; n steps.
//  backward: from `beta` (in/out, the metrics after step n-1), walks k = n-1 .. 0; for
//            every k < n_llr it first writes, with a = alpha before step k (alpha_in for
//            k = 0, else alpha_out row k-1):
//              raw[k]  = max_{nrzi=1}(a[pred] + g + beta[s]) - max_{nrzi=0}(...)
//              best_branch[k] = the branch index j * S + s of the overall maximum (the
//              first in order j = 0, s = 0.. on ties)
//            then beta <- max over successors.
struct MaxLogTables {
  int states = 0;
  const float* out0 = nullptr;
  const float* out1 = nullptr;
  const uint8_t* nrzi0 = nullptr;  // NRZI bit of branch (0, s)
  const uint8_t* nrzi1 = nullptr;
};
void maxlog_forward_scalar(const MaxLogTables& t, const float* alpha_in, const float* y,
                           const uint8_t* erased, size_t n, float* alpha_out);
void maxlog_forward_simd(const MaxLogTables& t, const float* alpha_in, const float* y,
                         const uint8_t* erased, size_t n, float* alpha_out);
void maxlog_backward_scalar(const MaxLogTables& t, const float* alpha_in, const float* alpha,
                            const float* y, const uint8_t* erased, size_t n, size_t n_llr,
                            float* beta, float* raw, uint16_t* best_branch);
void maxlog_backward_simd(const MaxLogTables& t, const float* alpha_in, const float* alpha,
                          const float* y, const uint8_t* erased, size_t n, size_t n_llr,
                          float* beta, float* raw, uint16_t* best_branch);
//  forward_backward: maxlog_forward over the first `emit` steps into alpha_out, then
//            maxlog_backward over all `total` >= emit steps with LLRs for k < emit, the
//            same bits, but scheduled as two recursions side by side (the forward on the
//            block's first half while the backward warms up and walks the second half, then
//            each on the other half, writing its LLRs). beta_kept: scratch of
//            (emit - emit / 2 + 2 * (emit / 2)) x states floats.
void maxlog_forward_backward_simd(const MaxLogTables& t, const float* alpha_in, const float* y,
                                  const uint8_t* erased, size_t emit, size_t total, float* alpha_out,
                                  float* beta, float* beta_kept, float* raw, uint16_t* best_branch);

// Hagenauer-Hoeher SOVA update along a traced survivor (steps in order, oldest first).
// For every merge t < last with a finite delta[t] (+inf: the merge cannot matter, skip):
// the competitor enters state[t] by the other branch; it is followed back for at most
// `window` steps (t, t-1, .., never below 0) until it meets the survivor's state, and at
// each of those steps whose NRZI bit differs from bit[] the reliability rel[u] is lowered
// to min(rel[u], delta[t]). Minima commute, so the SIMD kernel, which follows one merge
// per lane, gives exactly the scalar result. The SIMD kernel reads (and writes back
// unchanged) entries outside [0, last): every array must be valid from index
// -window to last + kSovaPad.
inline constexpr size_t kSovaPad = 64;
struct SovaPath {
  int memory = 1;                      // trellis memory m (state = the last m levels)
  const uint32_t* decisions = nullptr; // bit s: branch into state s at step t
  const uint8_t* state = nullptr;      // survivor state after step t
  const uint8_t* branch = nullptr;     // survivor branch into it
  const uint8_t* bit = nullptr;        // survivor NRZI bit at step t
  const float* delta = nullptr;        // |metric difference| at the survivor's merge at t
};
void sova_scalar(const SovaPath& p, size_t last, size_t window, float* rel);
void sova_simd(const SovaPath& p, size_t last, size_t window, float* rel);

// Name of the instruction set the SIMD kernels dispatch to on this machine.
const char* simd_target_name();

}  // namespace salvor::trellis
