// SIMD kernels of the trellis detectors (see trellis/kernels.hpp), one source compiled
// for every Highway target and dispatched at run time. Each state count S is its own
// instantiation so that the path metrics stay in registers across the steps of a run.
// The float operations per state are exactly those of the scalar references in
// trellis_kernels.cpp, in the same order.
#undef HWY_TARGET_INCLUDE
#define HWY_TARGET_INCLUDE "trellis_kernels_simd.cpp"
#include <hwy/foreach_target.h>  // IWYU pragma: keep
#include <hwy/highway.h>

#include <cstring>
#include <utility>
#include <limits>

#include "trellis/kernels.hpp"

HWY_BEFORE_NAMESPACE();
namespace salvor::trellis {
namespace HWY_NAMESPACE {
namespace hn = hwy::HWY_NAMESPACE;

// Lane indices of the two predecessor halves: new state s of a chunk reads lane s/2 of
// the matching predecessor chunk (first or second half of it for even or odd chunks).
template <class D>
struct PredIndex {
  using Indices = decltype(hn::SetTableIndices(D(), static_cast<const int32_t*>(nullptr)));
  Indices low, high;  // TableLookupLanes indices for even / odd chunks
  explicit PredIndex(D d) {
    constexpr size_t N = hn::MaxLanes(D());
    alignas(64) int32_t lo[N], hi[N];
    for (size_t l = 0; l < N; ++l) {
      lo[l] = static_cast<int32_t>(l / 2);
      hi[l] = static_cast<int32_t>(N / 2 + l / 2);
    }
    low = hn::SetTableIndices(d, lo);
    high = hn::SetTableIndices(d, hi);
  }
};

// Predecessor metrics of chunk c for branch 0 (first half of the states) and 1.
template <size_t C, class D, class V>
HWY_INLINE void gather_preds(const PredIndex<D>& ix, const V* m, size_t c, V& a0, V& a1) {
  if constexpr (C == 1) {
    a0 = hn::TableLookupLanes(m[0], ix.low);
    a1 = hn::TableLookupLanes(m[0], ix.high);
  } else {
    const auto& idx = (c & 1) ? ix.high : ix.low;
    a0 = hn::TableLookupLanes(m[c / 2], idx);
    a1 = hn::TableLookupLanes(m[c / 2 + C / 2], idx);
  }
}

// Bit l = lane l of the mask (lanes beyond N cleared: partial vectors compare garbage).
template <class D>
HWY_INLINE uint32_t mask_bits(D /*d*/, hn::Mask<D> m) {
  constexpr size_t N = hn::MaxLanes(D());
#if HWY_TARGET == HWY_SCALAR
  uint8_t bytes[8] = {0};
  hn::StoreMaskBits(D(), m, bytes);
  const uint32_t v = bytes[0];
#elif HWY_TARGET <= HWY_AVX3
  const uint32_t v = static_cast<uint32_t>(m.raw);
#else
  const uint32_t v = static_cast<uint32_t>(hn::detail::BitsFromMask(m));
#endif
  return N >= 32 ? v : (v & ((1u << N) - 1u));
}

template <int S>
void ViterbiEuclideanS(const EuclideanAcs& t, float* pm_io, size_t phase, const float* y,
                       const uint8_t* erased, size_t n, uint32_t* decisions, float* delta) {
  using D = hn::CappedTag<float, S>;
  const D d;
  using V = hn::Vec<D>;
  constexpr size_t N = hn::MaxLanes(D());
  constexpr size_t C = S / N;
  const PredIndex<D> ix(d);
  V pm[C], o0[C], o1[C], next[C];
  for (size_t c = 0; c < C; ++c) {
    pm[c] = hn::LoadU(d, pm_io + c * N);
    o0[c] = hn::LoadU(d, t.out0 + c * N);
    o1[c] = hn::LoadU(d, t.out1 + c * N);
  }
  for (size_t k = 0; k < n; ++k) {
    const V yv = hn::Set(d, y[k]);
    const bool er = erased != nullptr && erased[k] != 0;
    uint32_t bits = 0;
    for (size_t c = 0; c < C; ++c) {
      V v0, v1;
      gather_preds<C>(ix, pm, c, v0, v1);
      if (!er) {
        const V e0 = hn::Sub(yv, o0[c]), e1 = hn::Sub(yv, o1[c]);
        v0 = hn::Add(v0, hn::Mul(e0, e0));
        v1 = hn::Add(v1, hn::Mul(e1, e1));
      }
      const auto take1 = hn::Lt(v1, v0);
      next[c] = hn::Min(v0, v1);  // equal to the selected metric (no NaN, no -0)
      if (delta) hn::StoreU(hn::Abs(hn::Sub(v0, v1)), d, delta + k * S + c * N);
      bits |= mask_bits(d, take1) << (c * N);
    }
    if ((phase + k + 1) % kRenormInterval == 0) {
      V low = next[0];
      for (size_t c = 1; c < C; ++c) low = hn::Min(low, next[c]);
      low = hn::MinOfLanes(d, low);
      for (size_t c = 0; c < C; ++c) pm[c] = hn::Sub(next[c], low);
    } else {
      for (size_t c = 0; c < C; ++c) pm[c] = next[c];
    }
    decisions[k] = bits;
  }
  for (size_t c = 0; c < C; ++c) hn::StoreU(pm[c], d, pm_io + c * N);
}

void ViterbiEuclidean(const EuclideanAcs& t, float* pm, size_t phase, const float* y,
                      const uint8_t* erased, size_t n, uint32_t* decisions, float* delta) {
#if HWY_TARGET == HWY_SCALAR  // one lane: the reference is the kernel
  return viterbi_euclidean_scalar(t, pm, phase, y, erased, n, decisions, delta);
#else
  switch (t.states) {
    case 2: return ViterbiEuclideanS<2>(t, pm, phase, y, erased, n, decisions, delta);
    case 4: return ViterbiEuclideanS<4>(t, pm, phase, y, erased, n, decisions, delta);
    case 8: return ViterbiEuclideanS<8>(t, pm, phase, y, erased, n, decisions, delta);
    case 16: return ViterbiEuclideanS<16>(t, pm, phase, y, erased, n, decisions, delta);
    default: return ViterbiEuclideanS<32>(t, pm, phase, y, erased, n, decisions, delta);
  }
#endif
}

#if HWY_TARGET != HWY_SCALAR  // one lane: the scalar reference is the kernel
// ---- fixed-point Euclidean ACS (in-place butterflies, see kernels.hpp) -----------------

// Swaps lanes at distance DIST (16-bit lanes): within a 128-bit block through a byte
// shuffle (one instruction), across the two blocks of a 256-bit vector by swapping them.
template <size_t DIST, class D>
HWY_INLINE hn::Vec<D> swap_lanes(D d, hn::Vec<D> v) {
  if constexpr (DIST >= 8) {
    return hn::SwapAdjacentBlocks(v);
  } else {
    const hn::Repartition<uint8_t, D> d8;
    alignas(64) static constexpr uint8_t kIdx[64] = {
#define SALVOR_SWAP_BYTE(i) static_cast<uint8_t>(((((i) % 16) / 2) ^ DIST) * 2 + ((i) & 1))
#define SALVOR_SWAP_ROW(i)                                                                  \
  SALVOR_SWAP_BYTE(i), SALVOR_SWAP_BYTE(i + 1), SALVOR_SWAP_BYTE(i + 2), SALVOR_SWAP_BYTE(i + 3), \
      SALVOR_SWAP_BYTE(i + 4), SALVOR_SWAP_BYTE(i + 5), SALVOR_SWAP_BYTE(i + 6),             \
      SALVOR_SWAP_BYTE(i + 7)
        SALVOR_SWAP_ROW(0),  SALVOR_SWAP_ROW(8),  SALVOR_SWAP_ROW(16), SALVOR_SWAP_ROW(24),
        SALVOR_SWAP_ROW(32), SALVOR_SWAP_ROW(40), SALVOR_SWAP_ROW(48), SALVOR_SWAP_ROW(56)};
#undef SALVOR_SWAP_ROW
#undef SALVOR_SWAP_BYTE
    return hn::BitCast(d, hn::TableLookupBytes(hn::BitCast(d8, v), hn::Load(d8, kIdx)));
  }
}

template <int S>
struct FixedKernel {
  static constexpr int M = S == 2 ? 1 : S == 4 ? 2 : S == 8 ? 3 : S == 16 ? 4 : 5;
  static constexpr int kBytes = (S + 7) / 8;
  using D = hn::CappedTag<uint16_t, (S < 16 ? S : 16)>;
  using DI = hn::RebindToSigned<D>;
  using V = hn::Vec<D>;
  static constexpr size_t N = hn::MaxLanes(D());
  static constexpr size_t C = S / N;
  // Steps of one unrolled period: the layout repeats every M steps, renormalisation every
  // kRenormInterval (8); within a period both are known at compile time.
  static constexpr size_t L = M == 3 ? 24 : M == 5 ? 40 : 8;
  // The path metrics live in a plain local array of vectors that the steps take by
  // reference: as a member they would be reloaded after every store (vector types may
  // alias anything).
  struct Metrics {
    V v[C];
  };
  // The tables as plain pointers, read once: members of the tables' vectors would be
  // reloaded after every vector store (which may alias anything).
  struct Tables {
    const int16_t* own;
    const int16_t* partner;
    const uint64_t* trace_word;
  };

  // One step of layout phase P on sample yq (erased: no branch metric), then the
  // renormalisation if due; returns the step's traceback word.
  template <int P, bool kDelta>
  static HWY_INLINE uint64_t step(const Tables& t, Metrics& pm, int16_t yq, bool erased,
                                  bool renorm, uint16_t* delta) {
    constexpr size_t DIST = size_t{1} << (M - 1 - P);
    const D d;
    const DI di;
    const auto yv = hn::Set(di, yq);
    V next[C];
    uint32_t bits = 0;
    for (size_t c = 0; c < C; ++c) {
      V partner;
      if constexpr (DIST >= N) {
        partner = pm.v[c ^ (DIST / N)];
      } else {
        partner = swap_lanes<DIST>(d, pm.v[c]);
      }
      V own = pm.v[c];
      if (!erased) {
        // Samples and outputs are held times 64: the high half of e * e is e_q^2 >> 4.
        const auto eo = hn::Sub(yv, hn::LoadU(di, t.own + P * S + c * N));
        const auto ep = hn::Sub(yv, hn::LoadU(di, t.partner + P * S + c * N));
        own = hn::SaturatedAdd(own, hn::BitCast(d, hn::MulHigh(eo, eo)));
        partner = hn::SaturatedAdd(partner, hn::BitCast(d, hn::MulHigh(ep, ep)));
      }
      next[c] = hn::Min(own, partner);
      bits |= mask_bits(d, hn::Eq(next[c], partner)) << (c * N);
      if constexpr (kDelta) hn::StoreU(hn::Sub(hn::Max(own, partner), next[c]), d, delta + c * N);
    }
    if (renorm) {
      V low = next[0];
      for (size_t c = 1; c < C; ++c) low = hn::Min(low, next[c]);
      if constexpr (N == 16) {  // through the 128-bit minimum-position instruction
        const hn::Half<D> dh;
        const auto half = hn::Min(hn::LowerHalf(dh, low), hn::UpperHalf(dh, low));
        low = hn::Set(d, hn::GetLane(hn::MinOfLanes(dh, half)));
      } else {
        low = hn::MinOfLanes(d, low);
      }
      for (size_t c = 0; c < C; ++c) next[c] = hn::Sub(next[c], low);
    }
    for (size_t c = 0; c < C; ++c) pm.v[c] = next[c];
    const uint64_t* lut = t.trace_word + static_cast<size_t>(P) * kBytes * 256;
    uint64_t w = lut[bits & 0xff];
    for (int b = 1; b < kBytes; ++b) w |= lut[b * 256 + ((bits >> (8 * b)) & 0xff)];
    return w;
  }

  // L steps starting at a span step that is a multiple of L.
  template <bool kDelta, bool kErased, size_t... Q>
  static HWY_INLINE void period(const Tables& t, Metrics& pm, const int16_t* yq,
                                const uint8_t* erased, uint64_t* decisions, uint16_t* delta,
                                std::index_sequence<Q...>) {
    ((decisions[Q] = step<static_cast<int>(Q % M), kDelta>(
          t, pm, yq[Q], kErased && erased[Q] != 0, (Q + 1) % kRenormInterval == 0,
          kDelta ? delta + Q * S : nullptr)),
     ...);
  }

  template <bool kDelta, bool kErased, size_t... P>
  static HWY_INLINE void single(const Tables& t, Metrics& pm, int phase, size_t step_index,
                                const int16_t* yq, const uint8_t* erased, uint64_t* decisions,
                                uint16_t* delta, std::index_sequence<P...>) {
    ((phase == static_cast<int>(P)
          ? void(*decisions = step<static_cast<int>(P), kDelta>(
                t, pm, *yq, kErased && *erased != 0, (step_index + 1) % kRenormInterval == 0,
                delta))
          : void()),
     ...);
  }

  template <bool kDelta, bool kErased>
  static void steps(const Tables& tables, Metrics& metrics, size_t step0, const int16_t* yq,
                    const uint8_t* erased, size_t n, uint64_t* decisions, uint16_t* delta) {
    // Local copies whose address never escapes stay in registers across the stores.
    const Tables t = tables;
    Metrics pm = metrics;
    constexpr auto phases = std::make_index_sequence<M>();
    auto at = [&](size_t k) { return kErased ? erased + k : nullptr; };
    auto delta_at = [&](size_t k) { return kDelta ? delta + k * S : nullptr; };
    size_t k = 0;
    for (; k < n && (step0 + k) % L != 0; ++k)
      single<kDelta, kErased>(t, pm, static_cast<int>((step0 + k) % M), step0 + k, yq + k, at(k),
                              decisions + k, delta_at(k), phases);
    for (; k + L <= n; k += L)
      period<kDelta, kErased>(t, pm, yq + k, at(k), decisions + k, delta_at(k),
                              std::make_index_sequence<L>());
    for (; k < n; ++k)
      single<kDelta, kErased>(t, pm, static_cast<int>((step0 + k) % M), step0 + k, yq + k, at(k),
                              decisions + k, delta_at(k), phases);
    metrics = pm;
  }

  static void run(const FixedAcsTables& tables, uint16_t* pm_io, size_t step0, const int16_t* yq,
                  const uint8_t* erased, size_t n, uint64_t* decisions, uint16_t* delta) {
    const D d;
    const Tables t{tables.own_out.data(), tables.partner_out.data(), tables.trace_word.data()};
    const int p0 = static_cast<int>(step0 % M);
    // Into lane order: before a step of phase p0 the layout is the one after phase p0 - 1.
    alignas(64) uint16_t lanes[S];
    const uint8_t* before = tables.lane_state.data() + ((p0 + M - 1) % M) * S;
    for (int l = 0; l < S; ++l) lanes[l] = pm_io[before[l]];
    Metrics pm;
    for (size_t c = 0; c < C; ++c) pm.v[c] = hn::Load(d, lanes + c * N);
    if (delta)
      erased ? steps<true, true>(t, pm, step0, yq, erased, n, decisions, delta)
             : steps<true, false>(t, pm, step0, yq, erased, n, decisions, delta);
    else
      erased ? steps<false, true>(t, pm, step0, yq, erased, n, decisions, delta)
             : steps<false, false>(t, pm, step0, yq, erased, n, decisions, delta);
    for (size_t c = 0; c < C; ++c) hn::Store(pm.v[c], d, lanes + c * N);
    const uint8_t* after = tables.lane_state.data() + ((step0 + n + M - 1) % M) * S;
    for (int l = 0; l < S; ++l) pm_io[after[l]] = lanes[l];
  }
};

#endif  // HWY_TARGET != HWY_SCALAR

void ViterbiFixed(const FixedAcsTables& t, uint16_t* pm, size_t step0, const int16_t* yq,
                  const uint8_t* erased, size_t n, uint64_t* decisions, uint16_t* delta) {
#if HWY_TARGET == HWY_SCALAR
  return viterbi_fixed_scalar(t, pm, step0, yq, erased, n, decisions, delta);
#else
  switch (t.states) {
    case 2: return FixedKernel<2>::run(t, pm, step0, yq, erased, n, decisions, delta);
    case 4: return FixedKernel<4>::run(t, pm, step0, yq, erased, n, decisions, delta);
    case 8: return FixedKernel<8>::run(t, pm, step0, yq, erased, n, decisions, delta);
    case 16: return FixedKernel<16>::run(t, pm, step0, yq, erased, n, decisions, delta);
    default: return FixedKernel<32>::run(t, pm, step0, yq, erased, n, decisions, delta);
  }
#endif
}

void QuantizeSamples(const FixedAcsTables& t, const float* y, size_t n, int16_t* yq) {
#if HWY_TARGET == HWY_SCALAR
  return quantize_samples_scalar(t, y, n, yq);
#else
  const hn::ScalableTag<float> df;
  const hn::Rebind<int32_t, decltype(df)> di;
  const hn::Rebind<int16_t, decltype(df)> d16;
  const size_t L = hn::Lanes(df);
  const auto gain = hn::Set(df, t.gain);
  const auto hi = hn::Set(df, static_cast<float>(kFixedSampleLimit));
  const auto lo = hn::Neg(hi);
  size_t i = 0;
  for (; i + L <= n; i += L) {
    const auto v = hn::Min(hn::Max(hn::Mul(hn::LoadU(df, y + i), gain), lo), hi);
    hn::StoreU(hn::DemoteTo(d16, hn::ShiftLeft<kFixedScaleShift>(hn::NearestInt(v))), d16, yq + i);
  }
  if (i < n) quantize_samples_scalar(t, y + i, n - i, yq + i);
  (void)di;
#endif
}

template <int S, int N>
void ViterbiPredictiveSN(const PredictiveAcs& t, float* pm_io, float* hist_io, size_t phase,
                         const float* y, const uint8_t* erased, size_t n, uint32_t* decisions,
                         float* delta) {
  using D = hn::CappedTag<float, S>;
  const D d;
  using V = hn::Vec<D>;
  constexpr size_t L = hn::MaxLanes(D());
  constexpr size_t C = S / L;
  const PredIndex<D> ix(d);
  V pm[C], next[C];
  V h[N > 0 ? N : 1][C], nh[N > 0 ? N : 1][C];
  for (size_t c = 0; c < C; ++c) {
    pm[c] = hn::LoadU(d, pm_io + c * L);
    for (int i = 0; i < N; ++i) h[i][c] = hn::LoadU(d, hist_io + i * S + c * L);
  }
  for (size_t k = 0; k < n; ++k) {
    const V yv = hn::Set(d, y[k]);
    const bool er = erased != nullptr && erased[k] != 0;
    uint32_t bits = 0;
    for (size_t c = 0; c < C; ++c) {
      V v0, v1;
      gather_preds<C>(ix, pm, c, v0, v1);
      V hp0[N > 0 ? N : 1], hp1[N > 0 ? N : 1];  // predecessors' noise histories
      for (int i = 0; i < N; ++i) gather_preds<C>(ix, h[i], c, hp0[i], hp1[i]);
      const V o0 = hn::LoadU(d, t.out[0] + c * L), o1 = hn::LoadU(d, t.out[1] + c * L);
      if (!er) {
        V e0 = hn::Sub(hn::Sub(yv, o0), hn::LoadU(d, t.bias[0] + c * L));
        V e1 = hn::Sub(hn::Sub(yv, o1), hn::LoadU(d, t.bias[1] + c * L));
        for (int i = 0; i < N; ++i) {
          e0 = hn::Sub(e0, hn::Mul(hn::LoadU(d, t.coef[0] + i * S + c * L), hp0[i]));
          e1 = hn::Sub(e1, hn::Mul(hn::LoadU(d, t.coef[1] + i * S + c * L), hp1[i]));
        }
        v0 = hn::Add(v0, hn::Add(hn::LoadU(d, t.log_var[0] + c * L),
                                 hn::Mul(hn::Mul(e0, e0), hn::LoadU(d, t.inv_var[0] + c * L))));
        v1 = hn::Add(v1, hn::Add(hn::LoadU(d, t.log_var[1] + c * L),
                                 hn::Mul(hn::Mul(e1, e1), hn::LoadU(d, t.inv_var[1] + c * L))));
      }
      const auto take1 = hn::Lt(v1, v0);
      next[c] = hn::IfThenElse(take1, v1, v0);
      if (delta) hn::StoreU(hn::Abs(hn::Sub(v0, v1)), d, delta + k * S + c * L);
      bits |= mask_bits(d, take1) << (c * L);
      if constexpr (N > 0) {
        nh[0][c] = er ? hn::Zero(d) : hn::IfThenElse(take1, hn::Sub(yv, o1), hn::Sub(yv, o0));
        for (int i = 1; i < N; ++i) nh[i][c] = hn::IfThenElse(take1, hp1[i - 1], hp0[i - 1]);
      }
    }
    if ((phase + k + 1) % kRenormInterval == 0) {
      V low = next[0];
      for (size_t c = 1; c < C; ++c) low = hn::Min(low, next[c]);
      low = hn::MinOfLanes(d, low);
      for (size_t c = 0; c < C; ++c) pm[c] = hn::Sub(next[c], low);
    } else {
      for (size_t c = 0; c < C; ++c) pm[c] = next[c];
    }
    for (int i = 0; i < N; ++i)
      for (size_t c = 0; c < C; ++c) h[i][c] = nh[i][c];
    decisions[k] = bits;
  }
  for (size_t c = 0; c < C; ++c) {
    hn::StoreU(pm[c], d, pm_io + c * L);
    for (int i = 0; i < N; ++i) hn::StoreU(h[i][c], d, hist_io + i * S + c * L);
  }
}

template <int S>
void ViterbiPredictiveS(const PredictiveAcs& t, float* pm, float* hist, size_t phase,
                        const float* y, const uint8_t* erased, size_t n, uint32_t* decisions,
                        float* delta) {
  switch (t.order) {
    case 0: return ViterbiPredictiveSN<S, 0>(t, pm, hist, phase, y, erased, n, decisions, delta);
    case 1: return ViterbiPredictiveSN<S, 1>(t, pm, hist, phase, y, erased, n, decisions, delta);
    case 2: return ViterbiPredictiveSN<S, 2>(t, pm, hist, phase, y, erased, n, decisions, delta);
    case 3: return ViterbiPredictiveSN<S, 3>(t, pm, hist, phase, y, erased, n, decisions, delta);
    default: return ViterbiPredictiveSN<S, 4>(t, pm, hist, phase, y, erased, n, decisions, delta);
  }
}

void ViterbiPredictive(const PredictiveAcs& t, float* pm, float* hist, size_t phase,
                       const float* y, const uint8_t* erased, size_t n, uint32_t* decisions,
                       float* delta) {
#if HWY_TARGET == HWY_SCALAR
  return viterbi_predictive_scalar(t, pm, hist, phase, y, erased, n, decisions, delta);
#else
  switch (t.states) {
    case 2: return ViterbiPredictiveS<2>(t, pm, hist, phase, y, erased, n, decisions, delta);
    case 4: return ViterbiPredictiveS<4>(t, pm, hist, phase, y, erased, n, decisions, delta);
    case 8: return ViterbiPredictiveS<8>(t, pm, hist, phase, y, erased, n, decisions, delta);
    case 16: return ViterbiPredictiveS<16>(t, pm, hist, phase, y, erased, n, decisions, delta);
    default: return ViterbiPredictiveS<32>(t, pm, hist, phase, y, erased, n, decisions, delta);
  }
#endif
}

template <int S>
void MaxLogForwardS(const MaxLogTables& t, const float* alpha_in, const float* y,
                    const uint8_t* erased, size_t n, float* alpha_out) {
  using D = hn::CappedTag<float, S>;
  const D d;
  using V = hn::Vec<D>;
  constexpr size_t N = hn::MaxLanes(D());
  constexpr size_t C = S / N;
  const PredIndex<D> ix(d);
  V a[C], o0[C], o1[C], next[C];
  for (size_t c = 0; c < C; ++c) {
    a[c] = hn::LoadU(d, alpha_in + c * N);
    o0[c] = hn::LoadU(d, t.out0 + c * N);
    o1[c] = hn::LoadU(d, t.out1 + c * N);
  }
  for (size_t k = 0; k < n; ++k) {
    const V yv = hn::Set(d, y[k]);
    const bool er = erased != nullptr && erased[k] != 0;
    for (size_t c = 0; c < C; ++c) {
      V v0, v1;
      gather_preds<C>(ix, a, c, v0, v1);
      if (!er) {
        const V e0 = hn::Sub(yv, o0[c]), e1 = hn::Sub(yv, o1[c]);
        v0 = hn::Sub(v0, hn::Mul(e0, e0));
        v1 = hn::Sub(v1, hn::Mul(e1, e1));
      }
      next[c] = hn::Max(v0, v1);
    }
    V high = hn::Zero(d);
    if ((k + 1) % kRenormInterval == 0 || k + 1 == n) high = hn::Set(d, hn::GetLane(next[0]));
    for (size_t c = 0; c < C; ++c) {
      a[c] = hn::Sub(next[c], high);
      hn::StoreU(a[c], d, alpha_out + k * S + c * N);
    }
  }
}

#if HWY_TARGET != HWY_SCALAR
// The maxima over the lanes of a and of b, reduced together: the halves of both are
// folded into one vector first, so the shuffle-and-max steps run once for the two.
template <class D>
HWY_INLINE void max_of_lanes_of_two(D d, hn::Vec<D> a, hn::Vec<D> b, float& max_a, float& max_b) {
  constexpr size_t N = hn::MaxLanes(D());
  if constexpr (N == 16 || N == 8) {
    // [low half of a | low half of b] against the upper halves: a's maxima in the lower
    // half, b's in the upper half.
    auto m = hn::Max(hn::ConcatLowerLower(d, b, a), hn::ConcatUpperUpper(d, b, a));
    if constexpr (N == 16) m = hn::Max(m, hn::SwapAdjacentBlocks(m));  // within 256 bits
    m = hn::Max(m, hn::Shuffle1032(m));                                // within 128 bits
    m = hn::Max(m, hn::Shuffle2301(m));
    max_a = hn::GetLane(m);
    max_b = hn::GetLane(hn::UpperHalf(hn::Half<D>(), m));
  } else {
    max_a = hn::GetLane(hn::MaxOfLanes(d, a));
    max_b = hn::GetLane(hn::MaxOfLanes(d, b));
  }
}

template <int S>
void MaxLogBackwardS(const MaxLogTables& t, const float* alpha_in, const float* alpha,
                     const float* y, const uint8_t* erased, size_t n, size_t n_llr,
                     float* beta_io, float* raw, uint16_t* best_branch) {
  using D = hn::CappedTag<float, S>;
  const D d;
  using V = hn::Vec<D>;
  constexpr size_t N = hn::MaxLanes(D());
  constexpr size_t C = S / N;
  const PredIndex<D> ix(d);
  const V neg_inf = hn::Set(d, -std::numeric_limits<float>::infinity());
  V b[C], o0[C], o1[C], w0[C], w1[C], v0[C], v1[C];
  hn::Mask<D> one0[C], one1[C];  // branch carries NRZI bit 1
  // With memory >= 2 the NRZI bit x_k xor x_(k-1) is the new state's own: equal for both
  // branches into it.
  bool same_bits = true;
  for (int s = 0; s < S; ++s) same_bits = same_bits && t.nrzi0[s] == t.nrzi1[s];
  for (size_t c = 0; c < C; ++c) {
    b[c] = hn::LoadU(d, beta_io + c * N);
    o0[c] = hn::LoadU(d, t.out0 + c * N);
    o1[c] = hn::LoadU(d, t.out1 + c * N);
    alignas(64) float f0[N], f1[N];
    for (size_t l = 0; l < N; ++l) {
      f0[l] = t.nrzi0[c * N + l] ? 1.0f : 0.0f;
      f1[l] = t.nrzi1[c * N + l] ? 1.0f : 0.0f;
    }
    one0[c] = hn::Gt(hn::Load(d, f0), hn::Zero(d));
    one1[c] = hn::Gt(hn::Load(d, f1), hn::Zero(d));
  }
  for (size_t k = n; k-- > 0;) {
    const size_t done = n - k;  // steps of this call including k
    const V yv = hn::Set(d, y[k]);
    const bool er = erased != nullptr && erased[k] != 0;
    V g0[C], g1[C];  // squared errors (0 when erased)
    for (size_t c = 0; c < C; ++c) {
      if (er) {
        g0[c] = hn::Zero(d);
        g1[c] = hn::Zero(d);
      } else {
        const V e0 = hn::Sub(yv, o0[c]), e1 = hn::Sub(yv, o1[c]);
        g0[c] = hn::Mul(e0, e0);
        g1[c] = hn::Mul(e1, e1);
      }
    }
    if (k < n_llr) {
      const float* arow = k == 0 ? alpha_in : alpha + (k - 1) * S;
      V a[C];
      for (size_t c = 0; c < C; ++c) a[c] = hn::LoadU(d, arow + c * N);
      V acc1 = neg_inf, acc0 = neg_inf;
      for (size_t c = 0; c < C; ++c) {
        V p0, p1;
        gather_preds<C>(ix, a, c, p0, p1);
        v0[c] = hn::Add(hn::Sub(p0, g0[c]), b[c]);
        v1[c] = hn::Add(hn::Sub(p1, g1[c]), b[c]);
        if (same_bits) {  // both branches into a state carry its NRZI bit: one blend each
          const V v = hn::Max(v0[c], v1[c]);
          acc1 = hn::Max(acc1, hn::IfThenElse(one0[c], v, neg_inf));
          acc0 = hn::Max(acc0, hn::IfThenElse(one0[c], neg_inf, v));
        } else {
          acc1 = hn::Max(acc1, hn::IfThenElse(one0[c], v0[c], neg_inf));
          acc0 = hn::Max(acc0, hn::IfThenElse(one0[c], neg_inf, v0[c]));
          acc1 = hn::Max(acc1, hn::IfThenElse(one1[c], v1[c], neg_inf));
          acc0 = hn::Max(acc0, hn::IfThenElse(one1[c], neg_inf, v1[c]));
        }
      }
      float best1, best0;
      max_of_lanes_of_two(d, acc1, acc0, best1, best0);
      raw[k] = best1 - best0;
      if (best_branch) {
        const V best = hn::Set(d, best1 > best0 ? best1 : best0);
        uint16_t found = 0;
        bool done = false;
        for (size_t j = 0; j < 2 && !done; ++j)
          for (size_t c = 0; c < C && !done; ++c) {
            const intptr_t lane = hn::FindFirstTrue(d, hn::Eq(j ? v1[c] : v0[c], best));
            if (lane >= 0) {
              found = static_cast<uint16_t>(j * S + c * N + static_cast<size_t>(lane));
              done = true;
            }
          }
        best_branch[k] = found;
      }
    }
    for (size_t c = 0; c < C; ++c) {
      w0[c] = hn::Sub(b[c], g0[c]);
      w1[c] = hn::Sub(b[c], g1[c]);
    }
    // Predecessor p < S/2 is reached by branch 0 into states 2p, 2p+1; p >= S/2 by
    // branch 1 into 2p-S, 2p-S+1: pairwise maxima of adjacent lanes, compacted.
    V nb[C];
    if constexpr (C == 1) {
      nb[0] = hn::Max(hn::ConcatEven(d, w1[0], w0[0]), hn::ConcatOdd(d, w1[0], w0[0]));
    } else {
      for (size_t q = 0; q < C / 2; ++q) {
        nb[q] = hn::Max(hn::ConcatEven(d, w0[2 * q + 1], w0[2 * q]),
                        hn::ConcatOdd(d, w0[2 * q + 1], w0[2 * q]));
        nb[q + C / 2] = hn::Max(hn::ConcatEven(d, w1[2 * q + 1], w1[2 * q]),
                                hn::ConcatOdd(d, w1[2 * q + 1], w1[2 * q]));
      }
    }
    V high = hn::Zero(d);
    if (done % kRenormInterval == 0 || k == 0) high = hn::Set(d, hn::GetLane(nb[0]));
    for (size_t c = 0; c < C; ++c) b[c] = hn::Sub(nb[c], high);
  }
  for (size_t c = 0; c < C; ++c) hn::StoreU(b[c], d, beta_io + c * N);
}
#endif

void MaxLogForward(const MaxLogTables& t, const float* alpha_in, const float* y,
                   const uint8_t* erased, size_t n, float* alpha_out) {
#if HWY_TARGET == HWY_SCALAR
  return maxlog_forward_scalar(t, alpha_in, y, erased, n, alpha_out);
#else
  switch (t.states) {
    case 2: return MaxLogForwardS<2>(t, alpha_in, y, erased, n, alpha_out);
    case 4: return MaxLogForwardS<4>(t, alpha_in, y, erased, n, alpha_out);
    case 8: return MaxLogForwardS<8>(t, alpha_in, y, erased, n, alpha_out);
    case 16: return MaxLogForwardS<16>(t, alpha_in, y, erased, n, alpha_out);
    default: return MaxLogForwardS<32>(t, alpha_in, y, erased, n, alpha_out);
  }
#endif
}

void MaxLogBackward(const MaxLogTables& t, const float* alpha_in, const float* alpha,
                    const float* y, const uint8_t* erased, size_t n, size_t n_llr, float* beta,
                    float* raw, uint16_t* best_branch) {
#if HWY_TARGET == HWY_SCALAR
  return maxlog_backward_scalar(t, alpha_in, alpha, y, erased, n, n_llr, beta, raw, best_branch);
#else
  switch (t.states) {
    case 2:
      return MaxLogBackwardS<2>(t, alpha_in, alpha, y, erased, n, n_llr, beta, raw, best_branch);
    case 4:
      return MaxLogBackwardS<4>(t, alpha_in, alpha, y, erased, n, n_llr, beta, raw, best_branch);
    case 8:
      return MaxLogBackwardS<8>(t, alpha_in, alpha, y, erased, n, n_llr, beta, raw, best_branch);
    case 16:
      return MaxLogBackwardS<16>(t, alpha_in, alpha, y, erased, n, n_llr, beta, raw, best_branch);
    default:
      return MaxLogBackwardS<32>(t, alpha_in, alpha, y, erased, n, n_llr, beta, raw, best_branch);
  }
#endif
}

// One merge per lane: lane i follows the competitor of merge t0 + i; at back-step k all
// lanes touch distinct steps t0 + i - k, so the contiguous read-min-write is safe.
void Sova(const SovaPath& p, size_t last, size_t window, float* rel) {
#if HWY_TARGET == HWY_SCALAR
  return sova_scalar(p, last, window, rel);
#else
  const hn::ScalableTag<int32_t> di;
  const hn::RebindToUnsigned<decltype(di)> du;
  const hn::RebindToFloat<decltype(di)> df;
  const hn::Rebind<uint8_t, decltype(di)> d8;
  const size_t N = hn::Lanes(di);
  const int m = p.memory;
  const auto one = hn::Set(di, 1);
  const auto iota = hn::Iota(di, 0);
  const auto inf = hn::Set(df, std::numeric_limits<float>::infinity());
  auto nrzi = [&](decltype(iota) c, decltype(iota) j) {
    const auto word = hn::Or(c, hn::ShiftLeftSame(j, m));
    return hn::And(hn::Xor(word, hn::ShiftRight<1>(word)), one);
  };
  auto lower = [&](float* r, hn::Mask<decltype(di)> upd, decltype(inf) d) {
    const auto v = hn::LoadU(df, r);
    hn::StoreU(hn::IfThenElse(hn::RebindMask(df, upd), hn::Min(v, d), v), df, r);
  };
  for (size_t t0 = 0; t0 < last; t0 += N) {
    const auto tv = hn::Add(hn::Set(di, static_cast<int32_t>(t0)), iota);
    const auto d = hn::LoadU(df, p.delta + t0);
    auto active = hn::And(hn::Lt(tv, hn::Set(di, static_cast<int32_t>(last))),
                          hn::RebindMask(di, hn::Lt(d, inf)));
    if (hn::AllFalse(di, active)) continue;
    const auto st = hn::PromoteTo(di, hn::LoadU(d8, p.state + t0));
    const auto jc = hn::Xor(hn::PromoteTo(di, hn::LoadU(d8, p.branch + t0)), one);
    const auto bit = hn::PromoteTo(di, hn::LoadU(d8, p.bit + t0));
    lower(rel + t0, hn::And(active, hn::Ne(nrzi(st, jc), bit)), d);
    auto c = hn::Or(hn::ShiftRight<1>(st), hn::ShiftLeftSame(jc, m - 1));
    for (size_t k = 1; k < window; ++k) {
      const ptrdiff_t base = static_cast<ptrdiff_t>(t0) - static_cast<ptrdiff_t>(k);
      active = hn::And(active, hn::Gt(tv, hn::Set(di, static_cast<int32_t>(k) - 1)));  // u >= 0
      const auto ps = hn::PromoteTo(di, hn::LoadU(d8, p.state + base));
      active = hn::And(active, hn::Ne(c, ps));  // merged: the rest agrees
      if (hn::AllFalse(di, active)) break;
      const auto dec = hn::LoadU(du, p.decisions + base);
      const auto jj = hn::BitCast(di, hn::And(hn::Shr(dec, hn::BitCast(du, c)), hn::Set(du, 1u)));
      const auto ub = hn::PromoteTo(di, hn::LoadU(d8, p.bit + base));
      lower(rel + base, hn::And(active, hn::Ne(nrzi(c, jj), ub)), d);
      c = hn::Or(hn::ShiftRight<1>(c), hn::ShiftLeftSame(jj, m - 1));
    }
  }
#endif
}

const char* TargetName() { return hwy::TargetName(HWY_TARGET); }

}  // namespace HWY_NAMESPACE
}  // namespace salvor::trellis
HWY_AFTER_NAMESPACE();

#if HWY_ONCE
namespace salvor::trellis {

HWY_EXPORT(ViterbiEuclidean);
HWY_EXPORT(MaxLogForward);
HWY_EXPORT(MaxLogBackward);
HWY_EXPORT(TargetName);
HWY_EXPORT(Sova);
HWY_EXPORT(ViterbiPredictive);
HWY_EXPORT(ViterbiFixed);
HWY_EXPORT(QuantizeSamples);

void viterbi_predictive_simd(const PredictiveAcs& t, float* pm, float* hist, size_t phase,
                             const float* y, const uint8_t* erased, size_t n,
                             uint32_t* decisions, float* delta) {
  HWY_DYNAMIC_DISPATCH(ViterbiPredictive)(t, pm, hist, phase, y, erased, n, decisions, delta);
}

void sova_simd(const SovaPath& p, size_t last, size_t window, float* rel) {
  HWY_DYNAMIC_DISPATCH(Sova)(p, last, window, rel);
}

void viterbi_euclidean_simd(const EuclideanAcs& t, float* pm, size_t phase, const float* y,
                            const uint8_t* erased, size_t n, uint32_t* decisions, float* delta) {
  HWY_DYNAMIC_DISPATCH(ViterbiEuclidean)(t, pm, phase, y, erased, n, decisions, delta);
}

void maxlog_forward_simd(const MaxLogTables& t, const float* alpha_in, const float* y,
                         const uint8_t* erased, size_t n, float* alpha_out) {
  HWY_DYNAMIC_DISPATCH(MaxLogForward)(t, alpha_in, y, erased, n, alpha_out);
}

void maxlog_backward_simd(const MaxLogTables& t, const float* alpha_in, const float* alpha,
                          const float* y, const uint8_t* erased, size_t n, size_t n_llr,
                          float* beta, float* raw, uint16_t* best_branch) {
  HWY_DYNAMIC_DISPATCH(MaxLogBackward)(t, alpha_in, alpha, y, erased, n, n_llr, beta, raw,
                                       best_branch);
}

void viterbi_fixed_simd(const FixedAcsTables& t, uint16_t* pm, size_t step0, const int16_t* yq,
                        const uint8_t* erased, size_t n, uint64_t* decisions, uint16_t* delta) {
  HWY_DYNAMIC_DISPATCH(ViterbiFixed)(t, pm, step0, yq, erased, n, decisions, delta);
}

void quantize_samples_simd(const FixedAcsTables& t, const float* y, size_t n, int16_t* yq) {
  HWY_DYNAMIC_DISPATCH(QuantizeSamples)(t, y, n, yq);
}

const char* simd_target_name() { return HWY_DYNAMIC_DISPATCH(TargetName)(); }

}  // namespace salvor::trellis
#endif  // HWY_ONCE
