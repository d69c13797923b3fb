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

namespace salvor::trellis {

// Path metrics are renormalised (the minimum or maximum subtracted) after every
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
// steps k (of the call) with (k + 1) a multiple of kRenormInterval, and after the last.
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
