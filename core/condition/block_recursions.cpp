// Block forms of the conditioner's recursions (block_recursions.hpp): the tables, and the
// whole-block kernels written once with Google Highway and dispatched at run time. Lanes
// are processed kBlock at a time whatever the vector width, each in the order the scalar
// helpers in the header use.

#undef HWY_TARGET_INCLUDE
#define HWY_TARGET_INCLUDE "condition/block_recursions.cpp"
#include <hwy/foreach_target.h>  // IWYU pragma: keep
#include <hwy/highway.h>

#include "condition/block_recursions.hpp"

#include "common/error.hpp"

HWY_BEFORE_NAMESPACE();
namespace salvor::block_recursions {
namespace HWY_NAMESPACE {
namespace hn = hwy::HWY_NAMESPACE;

void BiquadBlocks(const BiquadBlockTables& t, const float* x, float* y, size_t blocks, double& s1_io, double& s2_io) {
  const hn::CappedTag<double, kBlock> d;
  const hn::Rebind<float, decltype(d)> df;
  const size_t N = hn::Lanes(d);
  const auto highest = hn::Set(d, 3.4028234663852886e38), lowest = hn::Neg(highest);  // float range
  double s1 = s1_io, s2 = s2_io;
  for (size_t b = 0; b < blocks; ++b) {
    alignas(64) double xd[kBlock];
    for (size_t j = 0; j < kBlock; ++j) xd[j] = x[b * kBlock + j];
    const auto vs1 = hn::Set(d, s1), vs2 = hn::Set(d, s2);
    for (size_t v = 0; v < kBlock; v += N) {
      auto acc = hn::Mul(hn::Load(d, t.h[0] + v), hn::Set(d, xd[0]));
      for (size_t j = 1; j < kBlock; ++j) acc = hn::Add(acc, hn::Mul(hn::Load(d, t.h[j] + v), hn::Set(d, xd[j])));
      acc = hn::Add(acc, hn::Mul(hn::Load(d, t.p1 + v), vs1));
      acc = hn::Add(acc, hn::Mul(hn::Load(d, t.p2 + v), vs2));
      hn::StoreU(hn::DemoteTo(df, hn::Min(hn::Max(acc, lowest), highest)), df, y + b * kBlock + v);
    }
    biquad_next_state(t, xd, s1, s2);
  }
  s1_io = s1;
  s2_io = s2;
}

void AgcBlocks(const AverageBlockTables& t, const float* x, float* y, size_t blocks, double& acc_io,
               double& weight_io, double reference, double max_gain, double& gain_io) {
  const hn::CappedTag<double, kBlock> d;
  const hn::Rebind<float, decltype(d)> df;
  const size_t N = hn::Lanes(d);
  const auto vref = hn::Set(d, reference), vmax = hn::Set(d, max_gain);
  const auto highest = hn::Set(d, 3.4028234663852886e38), lowest = hn::Neg(highest);  // float range
  double acc = acc_io, weight = weight_io;
  for (size_t b = 0; b < blocks; ++b) {
    alignas(64) double xd[kBlock], vd[kBlock];
    for (size_t j = 0; j < kBlock; ++j) {
      xd[j] = x[b * kBlock + j];
      vd[j] = xd[j] * xd[j];
    }
    const auto vacc = hn::Set(d, acc), vweight = hn::Set(d, weight);
    for (size_t v = 0; v < kBlock; v += N) {
      // lane sums in the order of lane_sum: c[0] v_0 + c[1] v_1 + ... (zeros beyond the lane)
      auto sum = hn::Mul(hn::Load(d, t.c[0] + v), hn::Set(d, vd[0]));
      for (size_t j = 1; j < kBlock; ++j) sum = hn::Add(sum, hn::Mul(hn::Load(d, t.c[j] + v), hn::Set(d, vd[j])));
      const auto a = hn::Add(hn::Mul(hn::Load(d, t.r_i + v), sum), hn::Mul(hn::Load(d, t.r_next + v), vacc));
      const auto w = hn::Add(hn::Load(d, t.w_add + v), hn::Mul(hn::Load(d, t.r_next + v), vweight));
      const auto g = hn::Mul(vref, hn::Sqrt(hn::Div(w, a)));
      const auto gain = hn::IfThenElse(hn::Gt(a, hn::Zero(d)), hn::IfThenElse(hn::Lt(g, vmax), g, vmax), vmax);
      const auto out = hn::Mul(hn::Load(d, xd + v), gain);
      hn::StoreU(hn::DemoteTo(df, hn::Min(hn::Max(out, lowest), highest)), df, y + b * kBlock + v);
    }
    // The state after the block: lane 7's values, worked out again in scalar (the next
    // block then need not wait for a lane to be extracted).
    double sum = 0.0;
    for (size_t j = 0; j < kBlock; ++j) sum = lane_sum(t, sum, j, vd[j]);
    acc = lane_acc(t, sum, kBlock - 1, acc);
    weight = lane_weight(t, kBlock - 1, weight);
  }
  acc_io = acc;
  weight_io = weight;
  if (blocks > 0) gain_io = agc_gain(acc, weight, reference, max_gain);
}

}  // namespace HWY_NAMESPACE
}  // namespace salvor::block_recursions
HWY_AFTER_NAMESPACE();

#if HWY_ONCE
namespace salvor::block_recursions {

HWY_EXPORT(BiquadBlocks);
HWY_EXPORT(AgcBlocks);

void biquad_blocks(const BiquadBlockTables& t, const float* x, float* y, size_t blocks, double& s1, double& s2) {
  HWY_DYNAMIC_DISPATCH(BiquadBlocks)(t, x, y, blocks, s1, s2);
}

void agc_blocks(const AverageBlockTables& t, const float* x, float* y, size_t blocks, BlockAverage& a,
                double reference, double max_gain, double& gain) {
  if (blocks == 0) return;
  if (!a.at_block_start()) throw_internal("agc_blocks: the average is inside a block");
  HWY_DYNAMIC_DISPATCH(AgcBlocks)(t, x, y, blocks, a.acc, a.weight, reference, max_gain, gain);
}

BiquadBlockTables biquad_block_tables(double b0, double b1, double b2, double a1, double a2) {
  // State matrix A and input vector B of s' = A s + B x (y = s1 + b0 x substituted).
  const double A[2][2] = {{-a1, 1.0}, {-a2, 0.0}};
  const double B[2] = {b1 - a1 * b0, b2 - a2 * b0};
  auto mul = [&](const double (&m)[2][2], const double (&n)[2][2], double (&out)[2][2]) {
    double r[2][2];
    for (int i = 0; i < 2; ++i)
      for (int j = 0; j < 2; ++j) r[i][j] = m[i][0] * n[0][j] + m[i][1] * n[1][j];
    for (int i = 0; i < 2; ++i)
      for (int j = 0; j < 2; ++j) out[i][j] = r[i][j];
  };
  BiquadBlockTables t{};
  // pow[k] = A^k, k = 0..8.
  double pow[kBlock + 1][2][2];
  pow[0][0][0] = pow[0][1][1] = 1.0;
  pow[0][0][1] = pow[0][1][0] = 0.0;
  for (size_t k = 1; k <= kBlock; ++k) mul(pow[k - 1], A, pow[k]);
  // Impulse response: h_0 = b0, h_m = (A^(m-1) B)_0, the first state component.
  double imp[kBlock];
  imp[0] = b0;
  for (size_t m = 1; m < kBlock; ++m) imp[m] = pow[m - 1][0][0] * B[0] + pow[m - 1][0][1] * B[1];
  for (size_t j = 0; j < kBlock; ++j)
    for (size_t i = 0; i < kBlock; ++i) t.h[j][i] = i >= j ? imp[i - j] : 0.0;
  // y_i's state terms: the first row of A^i.
  for (size_t i = 0; i < kBlock; ++i) {
    t.p1[i] = pow[i][0][0];
    t.p2[i] = pow[i][0][1];
  }
  // s after the block: A^8 s + sum_j A^(7-j) B x_j.
  for (size_t j = 0; j < kBlock; ++j) {
    const auto& P = pow[kBlock - 1 - j];
    t.g1[j] = P[0][0] * B[0] + P[0][1] * B[1];
    t.g2[j] = P[1][0] * B[0] + P[1][1] * B[1];
  }
  t.q11 = pow[kBlock][0][0];
  t.q12 = pow[kBlock][0][1];
  t.q21 = pow[kBlock][1][0];
  t.q22 = pow[kBlock][1][1];
  return t;
}

AverageBlockTables average_block_tables(double alpha, double retain) {
  AverageBlockTables t{};
  double rp[kBlock + 1];
  rp[0] = 1.0;
  for (size_t k = 1; k <= kBlock; ++k) rp[k] = rp[k - 1] * retain;
  double geometric = 0.0;
  for (size_t i = 0; i < kBlock; ++i) {
    t.r_i[i] = rp[i];
    t.r_next[i] = rp[i + 1];
    geometric += rp[i];
    t.w_add[i] = alpha * geometric;
    for (size_t j = 0; j < kBlock; ++j) t.c[j][i] = i >= j ? alpha / rp[j] : 0.0;
  }
  t.alpha = alpha;
  t.retain = retain;
  return t;
}

}  // namespace salvor::block_recursions
#endif
