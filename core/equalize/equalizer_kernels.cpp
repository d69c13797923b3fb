// SIMD kernels of the adaptive equalizer (see equalizer_kernels.hpp). Compiled with
// -ffp-contract=off (CMakeLists.txt) so that a multiply and an add are never fused: the
// filter-only path then equals the scalar reference bit for bit, and so does each tap
// update given the same step; the adaptive outputs sum in a different order (lanes, then
// across lanes; two updates ahead, see train_in_registers) than the reference's running sum.

#undef HWY_TARGET_INCLUDE
#define HWY_TARGET_INCLUDE "equalize/equalizer_kernels.cpp"
#include <hwy/foreach_target.h>  // IWYU pragma: keep
#include <hwy/highway.h>

#include <algorithm>
#include <cmath>

#include "equalize/equalizer_kernels.hpp"

HWY_BEFORE_NAMESPACE();
namespace salvor::equalize::detail {
namespace HWY_NAMESPACE {
namespace hn = hwy::HWY_NAMESPACE;

constexpr double kNlmsRegularization = 1e-9;  // as in equalizer.cpp

HWY_INLINE size_t back(size_t slot, size_t k, size_t ring) { return slot >= k ? slot - k : slot + ring - k; }

// sum_k a[k] b[k] over `padded` entries (a multiple of the lane count).
HWY_INLINE double dot(const double* HWY_RESTRICT a, const double* HWY_RESTRICT b, size_t padded) {
  const hn::ScalableTag<double> d;
  const size_t N = hn::Lanes(d);
  auto acc = hn::Mul(hn::LoadU(d, a), hn::LoadU(d, b));
  for (size_t k = N; k < padded; k += N) acc = hn::Add(acc, hn::Mul(hn::LoadU(d, a + k), hn::LoadU(d, b + k)));
  return hn::GetLane(hn::SumOfLanes(d, acc));
}

// out[q] = sum_{i=0}^{taps-1} w[i] x[q + taps-1-i], summed in the reference's order of i,
// one output per lane.
void fir_block(const double* HWY_RESTRICT w_rev, size_t taps, const double* HWY_RESTRICT x, size_t count,
               float* HWY_RESTRICT out) {
  const hn::ScalableTag<double> d;
  const hn::Rebind<float, decltype(d)> df;
  const size_t N = hn::Lanes(d);
  size_t q = 0;
  for (; q + N <= count; q += N) {
    auto acc = hn::Zero(d);
    for (size_t i = 0; i < taps; ++i)
      acc = hn::Add(acc, hn::Mul(hn::Set(d, w_rev[taps - 1 - i]), hn::LoadU(d, x + q + taps - 1 - i)));
    hn::StoreU(hn::DemoteTo(df, acc), df, out + q);
  }
  for (; q < count; ++q) {
    double y = 0.0;
    for (size_t i = 0; i < taps; ++i) y += w_rev[taps - 1 - i] * x[q + taps - 1 - i];
    out[q] = static_cast<float>(y);
  }
}

// Error statistics and the (N)LMS step for output j whose window starts at xw; the
// reference is Equalizer::adapt_at.
HWY_INLINE void adapt(LmsKernelState& s, const double* HWY_RESTRICT xw, double y, double d, bool allow_update) {
  const double e = d - y;
  const double e2 = e * e;
  s.span_sum += e2;
  s.total_sum += e2;
  ++s.span_count;
  ++s.total_count;
  if (!s.running_started) {
    s.running_mse = e2;
    s.running_started = true;
  } else {
    s.running_mse += (e2 - s.running_mse) / s.mse_time_constant;
  }
  if (!allow_update) return;
  const hn::ScalableTag<double> dd;
  const size_t N = hn::Lanes(dd);
  double gain = s.step_size;
  if (s.normalized) {
    auto energy = hn::Zero(dd);
    for (size_t k = 0; k < s.padded; k += N) {
      const auto v = hn::Mul(hn::LoadU(dd, xw + k), hn::LoadU(dd, s.window_mask + k));
      energy = hn::Add(energy, hn::Mul(v, v));
    }
    gain /= kNlmsRegularization + hn::GetLane(hn::SumOfLanes(dd, energy));
  }
  const auto ge = hn::Set(dd, gain * e);
  for (size_t k = 0; k < s.padded; k += N) {
    const auto step = hn::Mul(hn::Mul(ge, hn::LoadU(dd, s.update_mask + k)), hn::LoadU(dd, xw + k));
    hn::StoreU(hn::Add(hn::LoadU(dd, s.w_rev + k), step), dd, s.w_rev + k);
  }
}

// d_j = sum_m f_m a_{j-m} from the doubled level line; false when a level is unknown.
HWY_INLINE bool desired(const LmsKernelState& s, uint64_t j, size_t slot_j, double& d) {
  if (j + 1 < s.target_len) return false;
  d = 0.0;
  for (size_t m = 0; m < s.target_len; ++m) {
    const int8_t a = s.level[slot_j + s.ring - m];
    if (a == 0) return false;
    d += s.target[m] * a;
  }
  return true;
}

HWY_INLINE size_t store_sample(LmsKernelState& s, float v, bool flagged, int8_t level) {
  const size_t slot = s.next_slot;
  const bool finite = std::isfinite(v);
  const double x = finite ? v : 0.0;
  const uint8_t bad = flagged || !finite;
  s.x[slot] = x;
  s.x[slot + s.ring] = x;
  s.bad[slot] = bad;
  s.bad[slot + s.ring] = bad;
  s.level[slot] = level;
  s.level[slot + s.ring] = level;
  if (bad) s.last_bad_plus1 = s.n_in + 1;
  ++s.n_in;
  s.next_slot = slot + 1 == s.ring ? 0 : slot + 1;
  return slot;
}

// Training with the taps in K vector registers, adapting on every sample as LMS does, but
// with the output computed two updates ahead so that the serial dependency per sample is a
// few scalar operations rather than a whole dot product and its horizontal sum:
//   w_j = W + mu_{j-2} u_{j-2} + mu_{j-1} u_{j-1},  W = w_{j-2},  u = mask . x (window),
//   y_j = w_j . x_j = W . x_j + mu_{j-2} (u_{j-2} . x_j) + mu_{j-1} (u_{j-1} . x_j),
// where mu_j = gain_j e_j (0 when output j does not adapt). The three dot products use only
// weights and data known two samples earlier. The taps receive exactly the reference's
// updates in the reference's order; only y (hence e, mu) differs by rounding.
template <size_t K>
size_t train_in_registers(LmsKernelState& s, const float* in, const int8_t* levels, const uint8_t* erasure,
                          bool padding, float* out, size_t n) {
  const hn::ScalableTag<double> d;
  using V = decltype(hn::Zero(d));
  const size_t N = hn::Lanes(d);
  // Locals, not the struct: the byte stores below would otherwise force reloads (aliasing).
  double* HWY_RESTRICT x = s.x;
  uint8_t* HWY_RESTRICT bad = s.bad;
  int8_t* HWY_RESTRICT level = s.level;
  const double* HWY_RESTRICT target = s.target;
  const size_t ring = s.ring, taps = s.taps, delay = s.delay, target_len = s.target_len;
  const bool normalized = s.normalized;
  const double step_size = s.step_size;
  // Multiplying by the reciprocal keeps a division out of the running average's
  // sample-to-sample dependency (the reference divides; the two differ by rounding).
  const double inv_time_constant = 1.0 / s.mse_time_constant;
  size_t slot = s.next_slot;
  uint64_t n_in = s.n_in, last_bad_plus1 = s.last_bad_plus1;
  double running_mse = s.running_mse, span_sum = s.span_sum, total_sum = s.total_sum;
  bool running_started = s.running_started;
  size_t counted = 0;
  size_t produced = 0;

  V w[K], umask[K], wmask[K], u1[K], u2[K];
  // The pending updates' windows end one and two samples before the next sample (their
  // samples are still in the line; with fewer outputs so far their mu is 0).
  const double* x1 = x + back(back(slot, 1, ring), taps - 1, ring);
  const double* x2 = x + back(back(slot, 2, ring), taps - 1, ring);
  for (size_t k = 0; k < K; ++k) {
    w[k] = hn::LoadU(d, s.w_rev + k * N);
    umask[k] = hn::LoadU(d, s.update_mask + k * N);
    wmask[k] = hn::LoadU(d, s.window_mask + k * N);
    u1[k] = hn::Mul(umask[k], hn::LoadU(d, x1 + k * N));
    u2[k] = hn::Mul(umask[k], hn::LoadU(d, x2 + k * N));
  }
  double mu1 = s.pending_mu1, mu2 = s.pending_mu2;  // mu_{j-1}, mu_{j-2}: not yet folded into w

  // Samples are stored a chunk ahead of the loop that reads them: a wide load right after a
  // narrow store to the same bytes cannot be forwarded and would stall every sample.
  const size_t chunk_max = std::min<size_t>(64, ring - taps - 4);
  for (size_t t0 = 0; t0 < n;) {
    const size_t c = std::min(chunk_max, n - t0);
    size_t sl = slot;
    for (size_t t = t0; t < t0 + c; ++t) {
      const float v = in[t];
      const bool finite = std::isfinite(v);
      const double value = finite ? v : 0.0;
      const uint8_t flagged = padding || (erasure && erasure[t]) || !finite;
      x[sl] = value;
      x[sl + ring] = value;
      bad[sl] = flagged;
      bad[sl + ring] = flagged;
      level[sl] = levels[t];
      level[sl + ring] = levels[t];
      sl = sl + 1 == ring ? 0 : sl + 1;
    }
    for (size_t t = t0; t < t0 + c; ++t) {
      const size_t here = slot;
      slot = slot + 1 == ring ? 0 : slot + 1;
      const uint64_t m = n_in++;
      if (bad[here]) last_bad_plus1 = m + 1;
      if (m < delay) continue;
      const uint64_t j = m - delay;
      const double* xw = x + back(here, taps - 1, ring);
      V xv[K];
      for (size_t k = 0; k < K; ++k) xv[k] = hn::LoadU(d, xw + k * N);
      V p = hn::Mul(w[0], xv[0]);
      V c1 = hn::Mul(u1[0], xv[0]);
      V c2 = hn::Mul(u2[0], xv[0]);
      for (size_t k = 1; k < K; ++k) {
        p = hn::Add(p, hn::Mul(w[k], xv[k]));
        c1 = hn::Add(c1, hn::Mul(u1[k], xv[k]));
        c2 = hn::Add(c2, hn::Mul(u2[k], xv[k]));
      }
      // mu_{j-2} is known early: its term joins W . x_j before the one horizontal sum.
      const V m2 = hn::Set(d, mu2);
      const double ahead = hn::GetLane(hn::SumOfLanes(d, hn::Add(p, hn::Mul(m2, c2))));
      const double y = ahead + mu1 * hn::GetLane(hn::SumOfLanes(d, c1));
      out[produced++] = static_cast<float>(y);
      // Fold mu_{j-2} into w (it is w_{j-1} afterwards) and shift the pending updates.
      for (size_t k = 0; k < K; ++k) {
        w[k] = hn::Add(w[k], hn::Mul(m2, u2[k]));
        u2[k] = u1[k];
        u1[k] = hn::Mul(umask[k], xv[k]);
      }
      mu2 = mu1;
      mu1 = 0.0;
      if (m + 1 < taps + last_bad_plus1) continue;  // window reaches the span start or a flagged sample
      // d_j = sum_m f_m a_{j-m}; every level must be known (reference: Equalizer::desired_at).
      if (j + 1 < target_len) continue;
      const int8_t* lj = level + back(here, delay, ring) + ring;
      double dj = 0.0;
      bool known = true;
      for (size_t q = 0; q < target_len; ++q) {
        const int8_t a = lj[-static_cast<ptrdiff_t>(q)];
        if (a == 0) {
          known = false;
          break;
        }
        dj += target[q] * a;
      }
      if (!known) continue;
      const double e = dj - y;
      const double e2 = e * e;
      span_sum += e2;
      total_sum += e2;
      ++counted;
      if (!running_started) {
        running_mse = e2;
        running_started = true;
      } else {
        running_mse += (e2 - running_mse) * inv_time_constant;
      }
      double gain = step_size;
      if (normalized) {
        V u = hn::Mul(xv[0], wmask[0]);
        V energy = hn::Mul(u, u);
        for (size_t k = 1; k < K; ++k) {
          u = hn::Mul(xv[k], wmask[k]);
          energy = hn::Add(energy, hn::Mul(u, u));
        }
        gain /= kNlmsRegularization + hn::GetLane(hn::SumOfLanes(d, energy));
      }
      mu1 = gain * e;
    }
    t0 += c;
  }
  // The pending updates stay pending (the next call continues exactly where this one
  // stopped, so results do not depend on how the input is chunked).
  for (size_t k = 0; k < K; ++k) hn::StoreU(w[k], d, s.w_rev + k * N);
  s.pending_mu1 = mu1;
  s.pending_mu2 = mu2;
  s.next_slot = slot;
  s.n_in = n_in;
  if (n_in > delay) s.n_out = n_in - delay;
  s.last_bad_plus1 = last_bad_plus1;
  s.running_mse = running_mse;
  s.running_started = running_started;
  s.span_sum = span_sum;
  s.total_sum = total_sum;
  s.span_count += counted;
  s.total_count += counted;
  return produced;
}

// Applies the pending updates (see train_in_registers) to w_rev, oldest first.
void fold_pending(LmsKernelState& s) {
  if (s.pending_mu1 == 0.0 && s.pending_mu2 == 0.0) return;
  const size_t last = back(s.next_slot, 1, s.ring);
  const double* x1 = s.x + back(last, s.taps - 1, s.ring);
  const double* x2 = s.x + back(back(last, 1, s.ring), s.taps - 1, s.ring);
  for (size_t k = 0; k < s.padded; ++k) s.w_rev[k] = s.w_rev[k] + s.pending_mu2 * (s.update_mask[k] * x2[k]);
  for (size_t k = 0; k < s.padded; ++k) s.w_rev[k] = s.w_rev[k] + s.pending_mu1 * (s.update_mask[k] * x1[k]);
  s.pending_mu1 = s.pending_mu2 = 0.0;
}

size_t RunSpanImpl(LmsKernelState& s, const float* in, const int8_t* levels, const uint8_t* erasure, bool padding,
                   float* out, size_t n) {
  size_t produced = 0;
  const hn::ScalableTag<double> d;
  if (levels) {
    switch (s.padded / hn::Lanes(d)) {
      case 1: return train_in_registers<1>(s, in, levels, erasure, padding, out, n);
      case 2: return train_in_registers<2>(s, in, levels, erasure, padding, out, n);
      case 3: return train_in_registers<3>(s, in, levels, erasure, padding, out, n);
      case 4: return train_in_registers<4>(s, in, levels, erasure, padding, out, n);
      case 6: return train_in_registers<6>(s, in, levels, erasure, padding, out, n);
      case 8: return train_in_registers<8>(s, in, levels, erasure, padding, out, n);
      case 12: return train_in_registers<12>(s, in, levels, erasure, padding, out, n);
      case 16: return train_in_registers<16>(s, in, levels, erasure, padding, out, n);
      default: break;  // wider tap vectors on narrow targets: the plain loop below
    }
  }
  fold_pending(s);
  if (!levels) {
    // Filter only: store a chunk, then all its outputs at once from one contiguous stretch.
    const size_t chunk_max = s.ring - s.taps;
    for (size_t t = 0; t < n;) {
      const size_t c = std::min(chunk_max, n - t);
      const uint64_t first_in = s.n_in;
      size_t newest = 0;
      for (size_t k = 0; k < c; ++k) newest = store_sample(s, in[t + k], padding || (erasure && erasure[t + k]), 0);
      t += c;
      if (s.n_in <= s.delay) continue;
      const uint64_t j0 = (first_in > s.delay ? first_in : s.delay) - s.delay;
      const uint64_t j1 = s.n_in - s.delay;
      const size_t count = static_cast<size_t>(j1 - j0);
      const size_t start = back(newest, (count - 1) + (s.taps - 1), s.ring);
      fir_block(s.w_rev, s.taps, s.x + start, count, out + produced);
      produced += count;
      s.n_out = j1;
    }
    return produced;
  }
  for (size_t t = 0; t < n; ++t) {
    const size_t slot = store_sample(s, in[t], padding || (erasure && erasure[t]), levels[t]);
    if (s.n_in <= s.delay) continue;
    const uint64_t m = s.n_in - 1;
    const uint64_t j = m - s.delay;
    const double* xw = s.x + back(slot, s.taps - 1, s.ring);
    const double y = dot(s.w_rev, xw, s.padded);
    out[produced++] = static_cast<float>(y);
    s.n_out = j + 1;
    if (m + 1 < s.taps + s.last_bad_plus1) continue;  // window reaches the span start or a flagged sample
    double dj = 0.0;
    if (!desired(s, j, back(slot, s.delay, s.ring), dj)) continue;
    adapt(s, xw, y, dj, true);
  }
  return produced;
}

void AdaptPastImpl(LmsKernelState& s, uint64_t j, bool allow_update) {
  fold_pending(s);
  const uint64_t m = j + s.delay;
  if (m + 1 < s.taps) return;
  const size_t slot_m = static_cast<size_t>(m % s.ring);
  const size_t start = back(slot_m, s.taps - 1, s.ring);
  for (size_t k = 0; k < s.taps; ++k)
    if (s.bad[start + k]) return;
  double d = 0.0;
  if (!desired(s, j, back(slot_m, s.delay, s.ring), d)) return;
  const double* xw = s.x + start;
  adapt(s, xw, dot(s.w_rev, xw, s.padded), d, allow_update);
}

void FoldPendingImpl(LmsKernelState& s) { fold_pending(s); }

}  // namespace HWY_NAMESPACE
}  // namespace salvor::equalize::detail
HWY_AFTER_NAMESPACE();

#if HWY_ONCE
namespace salvor::equalize::detail {

HWY_EXPORT(RunSpanImpl);
HWY_EXPORT(AdaptPastImpl);
HWY_EXPORT(FoldPendingImpl);

size_t run_span(LmsKernelState& s, const float* in, const int8_t* levels, const uint8_t* erasure, bool padding,
                float* out, size_t n) {
  return HWY_DYNAMIC_DISPATCH(RunSpanImpl)(s, in, levels, erasure, padding, out, n);
}

void adapt_past(LmsKernelState& s, uint64_t j, bool allow_update) {
  HWY_DYNAMIC_DISPATCH(AdaptPastImpl)(s, j, allow_update);
}

void fold_pending_updates(LmsKernelState& s) { HWY_DYNAMIC_DISPATCH(FoldPendingImpl)(s); }

}  // namespace salvor::equalize::detail
#endif
