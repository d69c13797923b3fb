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
#include <initializer_list>
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

// The metrics of chunk c's butterfly partners at lane distance DIST: another chunk when
// DIST spans whole vectors, else the chunk with its lanes swapped.
template <size_t DIST, size_t N, class D, class V>
HWY_INLINE V butterfly_partner(D d, const V* pm, size_t c) {
  if constexpr (DIST >= N) {
    return pm[c ^ (DIST / N)];
  } else {
    return swap_lanes<DIST>(d, pm[c]);
  }
}

// The step loop both fixed-point kernels share: `n` steps from span step step0 through
// `s.template at<P>(k, renorm)` (P: layout phase, at compile time). Single steps up to a
// multiple of the period L, where layout (every M steps) and renormalisation (every
// kRenormInterval) repeat; whole periods unrolled, both known at compile time; single steps
// at the end.
template <int M, class StepAt, int... P>
HWY_INLINE void fixed_single_step(const StepAt& s, size_t k, size_t step_index,
                                  std::integer_sequence<int, P...>) {
  const int phase = static_cast<int>(step_index % M);
  const bool renorm = (step_index + 1) % kRenormInterval == 0;
  ((phase == P ? s.template at<P>(k, renorm) : void()), ...);
}

template <int M, class StepAt, size_t... Q>
HWY_INLINE void fixed_period(const StepAt& s, size_t k, std::index_sequence<Q...>) {
  (s.template at<static_cast<int>(Q % M)>(k + Q, (Q + 1) % kRenormInterval == 0), ...);
}

template <int M, size_t L, class StepAt>
HWY_INLINE void drive_fixed_steps(const StepAt& s, size_t step0, size_t n) {
  constexpr auto phases = std::make_integer_sequence<int, M>();
  size_t k = 0;
  for (; k < n && (step0 + k) % L != 0; ++k) fixed_single_step<M>(s, k, step0 + k, phases);
  for (; k + L <= n; k += L) fixed_period<M>(s, k, std::make_index_sequence<L>());
  for (; k < n; ++k) fixed_single_step<M>(s, k, step0 + k, phases);
}

// State-ordered metrics into lane order before a step of span step `step` (the layout is
// the one after the phase before it), and lane order back into state order after step - 1.
HWY_INLINE void to_lane_order(const FixedAcsTables& t, int memory, size_t step, const uint16_t* pm,
                              uint16_t* lanes) {
  const uint8_t* layout = t.lane_state.data() + ((step + memory - 1) % memory) * t.states;
  for (int l = 0; l < t.states; ++l) lanes[l] = pm[layout[l]];
}
HWY_INLINE void to_state_order(const FixedAcsTables& t, int memory, size_t step, const uint16_t* lanes,
                               uint16_t* pm) {
  const uint8_t* layout = t.lane_state.data() + ((step + memory - 1) % memory) * t.states;
  for (int l = 0; l < t.states; ++l) pm[layout[l]] = lanes[l];
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
      V partner = butterfly_partner<DIST, N>(d, pm.v, c);
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

  // One step at index k of the run, for drive_fixed_steps.
  template <bool kDelta, bool kErased>
  struct StepAt {
    const Tables& t;
    Metrics& pm;
    const int16_t* yq;
    const uint8_t* erased;
    uint64_t* decisions;
    uint16_t* delta;
    template <int P>
    HWY_INLINE void at(size_t k, bool renorm) const {
      decisions[k] = step<P, kDelta>(t, pm, yq[k], kErased && erased[k] != 0, renorm,
                                     kDelta ? delta + k * S : nullptr);
    }
  };

  template <bool kDelta, bool kErased>
  static void steps(const Tables& tables, Metrics& metrics, size_t step0, const int16_t* yq,
                    const uint8_t* erased, size_t n, uint64_t* decisions, uint16_t* delta) {
    // Local copies whose address never escapes stay in registers across the stores.
    const Tables t = tables;
    Metrics pm = metrics;
    drive_fixed_steps<M, L>(StepAt<kDelta, kErased>{t, pm, yq, erased, decisions, delta}, step0, n);
    metrics = pm;
  }

  static void run(const FixedAcsTables& tables, uint16_t* pm_io, size_t step0, const int16_t* yq,
                  const uint8_t* erased, size_t n, uint64_t* decisions, uint16_t* delta) {
    const D d;
    const Tables t{tables.own_out.data(), tables.partner_out.data(), tables.trace_word.data()};
    alignas(64) uint16_t lanes[S];
    to_lane_order(tables, M, step0, pm_io, lanes);
    Metrics pm;
    for (size_t c = 0; c < C; ++c) pm.v[c] = hn::Load(d, lanes + c * N);
    if (delta)
      erased ? steps<true, true>(t, pm, step0, yq, erased, n, decisions, delta)
             : steps<true, false>(t, pm, step0, yq, erased, n, decisions, delta);
    else
      erased ? steps<false, true>(t, pm, step0, yq, erased, n, decisions, delta)
             : steps<false, false>(t, pm, step0, yq, erased, n, decisions, delta);
    for (size_t c = 0; c < C; ++c) hn::Store(pm.v[c], d, lanes + c * N);
    to_state_order(tables, M, step0 + n, lanes, pm_io);
  }
};

// Two trellises side by side (viterbi_fixed_dual in kernels.hpp): trellis A in lanes
// [0, S) and B in lanes [S, 2S) of one 2S-lane vector where the machine has one that wide
// (C = 1), else A in the first C/2 chunks and B in the rest. Every swap of the in-place
// butterflies moves lanes by less than S, so it stays within one trellis, and the step is
// the single kernel's, instruction for instruction, on twice the states.
template <int S>
struct DualFixedKernel {
  static constexpr int M = S == 8 ? 3 : 4;
  static constexpr int kBytes = (S + 7) / 8;
  using D = hn::CappedTag<uint16_t, 2 * S>;
  using DI = hn::RebindToSigned<D>;
  using V = hn::Vec<D>;
  static constexpr size_t N = hn::MaxLanes(D());
  static constexpr size_t C = 2 * S / N;
  static constexpr size_t L = fixed_dual_period(M);
  static_assert(C == 1 || N <= static_cast<size_t>(S), "a chunk holds one trellis or both");
  struct Metrics {
    V v[C];
  };
  struct Tables {
    const int16_t* own;       // [P * 2S + lane]: the single kernel's rows, twice
    const int16_t* partner;
    const uint64_t* trace_word;
  };
  struct Lanes {
    const int16_t* yq[2];
    const uint8_t* erased[2];
    uint64_t* decisions[2];
    uint16_t* delta[2];
  };

  // Per chunk: a vector of A's value in A's lanes and B's in B's.
  template <class DV, typename T>
  static HWY_INLINE hn::Vec<DV> pair(DV dv, size_t c, T a, T b) {
    if constexpr (C == 1) {
      const hn::Half<DV> dh;
      return hn::Combine(dv, hn::Set(dh, b), hn::Set(dh, a));
    } else {
      return hn::Set(dv, c < C / 2 ? a : b);
    }
  }

  // Every lane of trellis A gets A's minimum, every lane of B gets B's.
  static HWY_INLINE void subtract_minima(D d, V* next) {
    if constexpr (C == 1) {
      V low = next[0];
      if constexpr (S >= 16) low = hn::Min(low, swap_lanes<8>(d, low));
      low = hn::Min(low, swap_lanes<4>(d, low));
      low = hn::Min(low, swap_lanes<2>(d, low));
      low = hn::Min(low, swap_lanes<1>(d, low));
      next[0] = hn::Sub(next[0], low);
    } else {
      for (size_t half = 0; half < 2; ++half) {
        V* v = next + half * (C / 2);
        V low = v[0];
        for (size_t c = 1; c < C / 2; ++c) low = hn::Min(low, v[c]);
        low = hn::MinOfLanes(d, low);
        for (size_t c = 0; c < C / 2; ++c) v[c] = hn::Sub(v[c], low);
      }
    }
  }

  template <int P, bool kDelta, bool kErased>
  static HWY_INLINE void step(const Tables& t, Metrics& pm, const Lanes& l, size_t k, bool renorm) {
    constexpr size_t DIST = size_t{1} << (M - 1 - P);
    const D d;
    const DI di;
    V next[C];
    uint32_t bits = 0;
    for (size_t c = 0; c < C; ++c) {
      V partner = butterfly_partner<DIST, N>(d, pm.v, c);
      const auto yv = pair(di, c, l.yq[0][k], l.yq[1][k]);
      const auto eo = hn::Sub(yv, hn::LoadU(di, t.own + P * 2 * S + c * N));
      const auto ep = hn::Sub(yv, hn::LoadU(di, t.partner + P * 2 * S + c * N));
      V bo = hn::BitCast(d, hn::MulHigh(eo, eo)), bp = hn::BitCast(d, hn::MulHigh(ep, ep));
      if constexpr (kErased) {  // an erased step adds no branch metric
        auto erased = [&](int j) { return l.erased[j] != nullptr && l.erased[j][k] != 0; };
        const auto keep = pair(d, c, static_cast<uint16_t>(erased(0) ? 0 : 0xffff),
                               static_cast<uint16_t>(erased(1) ? 0 : 0xffff));
        bo = hn::And(bo, keep);
        bp = hn::And(bp, keep);
      }
      const V own = hn::SaturatedAdd(pm.v[c], bo);
      partner = hn::SaturatedAdd(partner, bp);
      next[c] = hn::Min(own, partner);
      bits |= mask_bits(d, hn::Eq(next[c], partner)) << (c * N);
      if constexpr (kDelta) {
        const V dv = hn::Sub(hn::Max(own, partner), next[c]);
        if constexpr (C == 1) {
          const hn::Half<D> dh;
          hn::StoreU(hn::LowerHalf(dh, dv), dh, l.delta[0] + k * S);
          hn::StoreU(hn::UpperHalf(dh, dv), dh, l.delta[1] + k * S);
        } else {
          hn::StoreU(dv, d, l.delta[c / (C / 2)] + k * S + (c % (C / 2)) * N);
        }
      }
    }
    if (renorm) subtract_minima(d, next);
    for (size_t c = 0; c < C; ++c) pm.v[c] = next[c];
    const uint64_t* lut = t.trace_word + static_cast<size_t>(P) * kBytes * 256;
    for (int j = 0; j < 2; ++j) {
      const uint32_t own_bits = bits >> (j * S);
      uint64_t w = lut[own_bits & 0xff];
      for (int b = 1; b < kBytes; ++b) w |= lut[b * 256 + ((own_bits >> (8 * b)) & 0xff)];
      l.decisions[j][k] = w;
    }
  }

  template <bool kDelta, bool kErased>
  struct StepAt {
    const Tables& t;
    Metrics& pm;
    const Lanes& l;
    template <int P>
    HWY_INLINE void at(size_t k, bool renorm) const {
      step<P, kDelta, kErased>(t, pm, l, k, renorm);
    }
  };

  template <bool kDelta, bool kErased>
  static void steps(const Tables& tables, Metrics& metrics, const Lanes& lanes, size_t step0, size_t n) {
    const Tables t = tables;
    const Lanes l = lanes;
    Metrics pm = metrics;
    drive_fixed_steps<M, L>(StepAt<kDelta, kErased>{t, pm, l}, step0, n);
    metrics = pm;
  }

  static void run(const FixedAcsTables& tables, size_t step0, size_t n, const FixedLane& a,
                  const FixedLane& b) {
    const D d;
    const Tables t{tables.own_out2.data(), tables.partner_out2.data(), tables.trace_word.data()};
    const Lanes l{{a.yq, b.yq}, {a.erased, b.erased}, {a.decisions, b.decisions}, {a.delta, b.delta}};
    alignas(64) uint16_t lanes[2 * S];
    to_lane_order(tables, M, step0, a.pm, lanes);
    to_lane_order(tables, M, step0, b.pm, lanes + S);
    Metrics pm;
    for (size_t c = 0; c < C; ++c) pm.v[c] = hn::Load(d, lanes + c * N);
    const bool delta = a.delta != nullptr, erased = a.erased != nullptr || b.erased != nullptr;
    if (delta)
      erased ? steps<true, true>(t, pm, l, step0, n) : steps<true, false>(t, pm, l, step0, n);
    else
      erased ? steps<false, true>(t, pm, l, step0, n) : steps<false, false>(t, pm, l, step0, n);
    for (size_t c = 0; c < C; ++c) hn::Store(pm.v[c], d, lanes + c * N);
    to_state_order(tables, M, step0 + n, lanes, a.pm);
    to_state_order(tables, M, step0 + n, lanes + S, b.pm);
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

void ViterbiFixedDual(const FixedAcsTables& t, size_t step0, size_t n, const FixedLane& a,
                      const FixedLane& b) {
#if HWY_TARGET != HWY_SCALAR
  if (t.states == 8) return DualFixedKernel<8>::run(t, step0, n, a, b);
  if (t.states == 16) return DualFixedKernel<16>::run(t, step0, n, a, b);
#endif
  for (const FixedLane* l : {&a, &b}) ViterbiFixed(t, l->pm, step0, l->yq, l->erased, n, l->decisions, l->delta);
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

// The steps of the max-log-MAP recursions on S states in C vectors of N lanes, written once
// for the forward kernel, the backward kernel and the two run side by side.
template <int S>
struct MaxLogSteps {
  using D = hn::CappedTag<float, S>;
  using V = hn::Vec<D>;
  static constexpr size_t N = hn::MaxLanes(D());
  static constexpr size_t C = S / N;
  D d;
  PredIndex<D> ix{d};
  V o0[C], o1[C], neg_inf;
  hn::Mask<D> one0[C], one1[C];  // branch carries NRZI bit 1

  explicit MaxLogSteps(const MaxLogTables& t) : neg_inf(hn::Set(d, -std::numeric_limits<float>::infinity())) {
    for (size_t c = 0; c < C; ++c) {
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
  }
  // Squared errors of the branches into each state (0 when erased).
  HWY_INLINE void gammas(float y, bool erased, V* g0, V* g1) const {
    const V yv = hn::Set(d, y);
    for (size_t c = 0; c < C; ++c) {
      if (erased) {
        g0[c] = hn::Zero(d);
        g1[c] = hn::Zero(d);
      } else {
        const V e0 = hn::Sub(yv, o0[c]), e1 = hn::Sub(yv, o1[c]);
        g0[c] = hn::Mul(e0, e0);
        g1[c] = hn::Mul(e1, e1);
      }
    }
  }
  // Path metrics into each state by branch 0 and 1: the predecessors' alpha minus gamma.
  HWY_INLINE void into(const V* a, const V* g0, const V* g1, V* w0, V* w1) const {
    for (size_t c = 0; c < C; ++c) {
      V p0, p1;
      gather_preds<C>(ix, a, c, p0, p1);
      w0[c] = hn::Sub(p0, g0[c]);
      w1[c] = hn::Sub(p1, g1[c]);
    }
  }
  // alpha <- max over the two branches, less state 0's metric when renormalising.
  HWY_INLINE void forward(const V* w0, const V* w1, bool renorm, V* a) const {
    V next[C];
    for (size_t c = 0; c < C; ++c) next[c] = hn::Max(w0[c], w1[c]);
    const V high = renorm ? hn::Set(d, hn::GetLane(next[0])) : hn::Zero(d);
    for (size_t c = 0; c < C; ++c) a[c] = hn::Sub(next[c], high);
  }
  // raw = max over bit-1 branches of (w + beta) - max over bit-0 branches; best: the first
  // branch j * S + s (order j, then s) that reaches the overall maximum, when asked.
  template <bool kSameBits>
  HWY_INLINE void llr(const V* w0, const V* w1, const V* b, float* raw, uint16_t* best) const {
    V v0[C], v1[C];
    V acc1 = neg_inf, acc0 = neg_inf;
    for (size_t c = 0; c < C; ++c) {
      v0[c] = hn::Add(w0[c], b[c]);
      v1[c] = hn::Add(w1[c], b[c]);
      if constexpr (kSameBits) {  // both branches into a state carry its NRZI bit: one blend each
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
    *raw = best1 - best0;
    if (best) {
      const V top = hn::Set(d, best1 > best0 ? best1 : best0);
      uint16_t found = 0;
      bool done = false;
      for (size_t j = 0; j < 2 && !done; ++j)
        for (size_t c = 0; c < C && !done; ++c) {
          const intptr_t lane = hn::FindFirstTrue(d, hn::Eq(j ? v1[c] : v0[c], top));
          if (lane >= 0) {
            found = static_cast<uint16_t>(j * S + c * N + static_cast<size_t>(lane));
            done = true;
          }
        }
      *best = found;
    }
  }
  // beta <- max over successors. Predecessor p < S/2 is reached by branch 0 into states
  // 2p, 2p+1; p >= S/2 by branch 1 into 2p-S, 2p-S+1: pairwise maxima of adjacent lanes,
  // compacted.
  HWY_INLINE void backward(const V* g0, const V* g1, bool renorm, V* b) const {
    V w0[C], w1[C], nb[C];
    for (size_t c = 0; c < C; ++c) {
      w0[c] = hn::Sub(b[c], g0[c]);
      w1[c] = hn::Sub(b[c], g1[c]);
    }
    if constexpr (C == 1) {
      nb[0] = hn::Max(hn::ConcatEven(d, w1[0], w0[0]), hn::ConcatOdd(d, w1[0], w0[0]));
    } else {
      for (size_t q = 0; q < C / 2; ++q) {
        nb[q] = hn::Max(hn::ConcatEven(d, w0[2 * q + 1], w0[2 * q]), hn::ConcatOdd(d, w0[2 * q + 1], w0[2 * q]));
        nb[q + C / 2] =
            hn::Max(hn::ConcatEven(d, w1[2 * q + 1], w1[2 * q]), hn::ConcatOdd(d, w1[2 * q + 1], w1[2 * q]));
      }
    }
    const V high = renorm ? hn::Set(d, hn::GetLane(nb[0])) : hn::Zero(d);
    for (size_t c = 0; c < C; ++c) b[c] = hn::Sub(nb[c], high);
  }
  HWY_INLINE void load(const float* p, V* v) const {
    for (size_t c = 0; c < C; ++c) v[c] = hn::LoadU(d, p + c * N);
  }
  HWY_INLINE void store(const V* v, float* p) const {
    for (size_t c = 0; c < C; ++c) hn::StoreU(v[c], d, p + c * N);
  }
};

// Renormalisation points, as in the scalar reference: forward after steps k + 1 = multiple
// of the interval and after the last; backward when the steps done (counted from the end,
// including k) are a multiple, and at k = 0.
HWY_INLINE bool forward_renorm(size_t k, size_t n) { return (k + 1) % kRenormInterval == 0 || k + 1 == n; }
HWY_INLINE bool backward_renorm(size_t k, size_t n) { return (n - k) % kRenormInterval == 0 || k == 0; }

template <int S>
void MaxLogForwardS(const MaxLogTables& t, const float* alpha_in, const float* y,
                    const uint8_t* erased, size_t n, float* alpha_out) {
  const MaxLogSteps<S> m(t);
  constexpr size_t C = MaxLogSteps<S>::C;
  typename MaxLogSteps<S>::V a[C], g0[C], g1[C], w0[C], w1[C];
  m.load(alpha_in, a);
  for (size_t k = 0; k < n; ++k) {
    m.gammas(y[k], erased != nullptr && erased[k] != 0, g0, g1);
    m.into(a, g0, g1, w0, w1);
    m.forward(w0, w1, forward_renorm(k, n), a);
    m.store(a, alpha_out + k * S);
  }
}

template <int S, bool kSameBits>
void MaxLogBackwardSB(const MaxLogTables& t, const float* alpha_in, const float* alpha,
                      const float* y, const uint8_t* erased, size_t n, size_t n_llr,
                      float* beta_io, float* raw, uint16_t* best_branch) {
  const MaxLogSteps<S> m(t);
  constexpr size_t C = MaxLogSteps<S>::C;
  typename MaxLogSteps<S>::V b[C], a[C], g0[C], g1[C], w0[C], w1[C];
  m.load(beta_io, b);
  for (size_t k = n; k-- > 0;) {
    m.gammas(y[k], erased != nullptr && erased[k] != 0, g0, g1);
    if (k < n_llr) {
      m.load(k == 0 ? alpha_in : alpha + (k - 1) * S, a);
      m.into(a, g0, g1, w0, w1);
      m.template llr<kSameBits>(w0, w1, b, raw + k, best_branch ? best_branch + k : nullptr);
    }
    m.backward(g0, g1, backward_renorm(k, n), b);
  }
  m.store(b, beta_io);
}

// The branches into a state carry the same NRZI bit (memory >= 2): a compile-time choice,
// so that the per-step LLR has no test.
inline bool same_nrzi_bits(const MaxLogTables& t) {
  for (int s = 0; s < t.states; ++s)
    if (t.nrzi0[s] != t.nrzi1[s]) return false;
  return true;
}

template <int S>
void MaxLogBackwardS(const MaxLogTables& t, const float* alpha_in, const float* alpha,
                     const float* y, const uint8_t* erased, size_t n, size_t n_llr,
                     float* beta_io, float* raw, uint16_t* best_branch) {
  if (same_nrzi_bits(t)) return MaxLogBackwardSB<S, true>(t, alpha_in, alpha, y, erased, n, n_llr, beta_io, raw, best_branch);
  MaxLogBackwardSB<S, false>(t, alpha_in, alpha, y, erased, n, n_llr, beta_io, raw, best_branch);
}

// maxlog_forward(emit) then maxlog_backward(total, emit), scheduled so that two independent
// recursions are always in flight (each alone waits on its own latency): while the forward
// walks the block's first half, the backward warms up and walks the second half, keeping
// its metrics; then the forward walks the second half and writes those LLRs (its own alpha
// with the kept beta) while the backward walks the first half and writes theirs. Every
// value is made by the same operations as in the two kernels, so the results are the same
// bits.
template <int S, bool kSameBits>
void MaxLogForwardBackwardSB(const MaxLogTables& t, const float* alpha_in, const float* y,
                             const uint8_t* erased, size_t emit, size_t total, float* alpha_out,
                             float* beta_io, float* beta_kept, float* raw, uint16_t* best_branch) {
  const MaxLogSteps<S> m(t);
  constexpr size_t C = MaxLogSteps<S>::C;
  using V = typename MaxLogSteps<S>::V;
  auto er = [&](size_t k) { return erased != nullptr && erased[k] != 0; };
  const size_t h = emit / 2;  // forward first on [0, h), backward first on [h, total)
  V a[C], b[C], fg0[C], fg1[C], fw0[C], fw1[C], bg0[C], bg1[C], bw0[C], bw1[C], kept[C];
  m.load(alpha_in, a);
  m.load(beta_io, b);
  // One backward step k of the first phase (no LLR; beta kept where the forward needs it).
  auto backward_first = [&](size_t k) {
    m.gammas(y[k], er(k), bg0, bg1);
    if (k >= h && k < emit) m.store(b, beta_kept + (k - h) * S);
    m.backward(bg0, bg1, backward_renorm(k, total), b);
  };
  // The forward's path metrics into each state at step k < h are also what the backward's
  // LLR at k adds its beta to (the same gather of alpha(k-1), the same gamma): kept, so the
  // backward needs neither the gather nor the gamma again.
  float* into_kept = beta_kept + (emit - h) * S;  // 2 x h x S floats after beta's
  auto forward_plain = [&](size_t k) {
    m.gammas(y[k], er(k), fg0, fg1);
    m.into(a, fg0, fg1, fw0, fw1);
    m.store(fw0, into_kept + (2 * k) * S);
    m.store(fw1, into_kept + (2 * k + 1) * S);
    m.forward(fw0, fw1, forward_renorm(k, emit), a);
    m.store(a, alpha_out + k * S);
  };
  // Phase 1: the backward from the end down to h (its extra steps first), the forward
  // over [0, h) beside its last h steps.
  size_t kb = total;
  while (kb - h > h) backward_first(--kb);
  for (size_t kf = 0; kf < h; ++kf) {
    forward_plain(kf);
    backward_first(--kb);
  }
  // Phase 2: the forward over [h, emit) with LLRs, the backward over [0, h) with LLRs.
  for (size_t kf = h; kf < emit; ++kf) {
    m.gammas(y[kf], er(kf), fg0, fg1);
    m.into(a, fg0, fg1, fw0, fw1);
    m.load(beta_kept + (kf - h) * S, kept);
    m.template llr<kSameBits>(fw0, fw1, kept, raw + kf, best_branch ? best_branch + kf : nullptr);
    m.forward(fw0, fw1, forward_renorm(kf, emit), a);
    m.store(a, alpha_out + kf * S);
    if (kb > 0) {
      const size_t k = --kb;
      m.gammas(y[k], er(k), bg0, bg1);
      m.load(into_kept + (2 * k) * S, bw0);
      m.load(into_kept + (2 * k + 1) * S, bw1);
      m.template llr<kSameBits>(bw0, bw1, b, raw + k, best_branch ? best_branch + k : nullptr);
      m.backward(bg0, bg1, backward_renorm(k, total), b);
    }
  }
  m.store(b, beta_io);
}

template <int S>
void MaxLogForwardBackwardS(const MaxLogTables& t, const float* alpha_in, const float* y,
                            const uint8_t* erased, size_t emit, size_t total, float* alpha_out,
                            float* beta_io, float* beta_kept, float* raw, uint16_t* best_branch) {
  if (same_nrzi_bits(t))
    return MaxLogForwardBackwardSB<S, true>(t, alpha_in, y, erased, emit, total, alpha_out, beta_io, beta_kept, raw,
                                            best_branch);
  MaxLogForwardBackwardSB<S, false>(t, alpha_in, y, erased, emit, total, alpha_out, beta_io, beta_kept, raw,
                                    best_branch);
}
#endif  // HWY_TARGET != HWY_SCALAR

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

void MaxLogForwardBackward(const MaxLogTables& t, const float* alpha_in, const float* y,
                           const uint8_t* erased, size_t emit, size_t total, float* alpha_out,
                           float* beta, float* beta_kept, float* raw, uint16_t* best_branch) {
#if HWY_TARGET == HWY_SCALAR
  (void)beta_kept;
  maxlog_forward_scalar(t, alpha_in, y, erased, emit, alpha_out);
  maxlog_backward_scalar(t, alpha_in, alpha_out, y, erased, total, emit, beta, raw, best_branch);
#else
  switch (t.states) {
    case 2: return MaxLogForwardBackwardS<2>(t, alpha_in, y, erased, emit, total, alpha_out, beta, beta_kept, raw, best_branch);
    case 4: return MaxLogForwardBackwardS<4>(t, alpha_in, y, erased, emit, total, alpha_out, beta, beta_kept, raw, best_branch);
    case 8: return MaxLogForwardBackwardS<8>(t, alpha_in, y, erased, emit, total, alpha_out, beta, beta_kept, raw, best_branch);
    case 16: return MaxLogForwardBackwardS<16>(t, alpha_in, y, erased, emit, total, alpha_out, beta, beta_kept, raw, best_branch);
    default: return MaxLogForwardBackwardS<32>(t, alpha_in, y, erased, emit, total, alpha_out, beta, beta_kept, raw, best_branch);
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
HWY_EXPORT(MaxLogForwardBackward);
HWY_EXPORT(TargetName);
HWY_EXPORT(Sova);
HWY_EXPORT(ViterbiPredictive);
HWY_EXPORT(ViterbiFixed);
HWY_EXPORT(ViterbiFixedDual);
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

void maxlog_forward_backward_simd(const MaxLogTables& t, const float* alpha_in, const float* y,
                                  const uint8_t* erased, size_t emit, size_t total, float* alpha_out,
                                  float* beta, float* beta_kept, float* raw, uint16_t* best_branch) {
  HWY_DYNAMIC_DISPATCH(MaxLogForwardBackward)(t, alpha_in, y, erased, emit, total, alpha_out, beta, beta_kept,
                                              raw, best_branch);
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

void viterbi_fixed_dual_simd(const FixedAcsTables& t, size_t step0, size_t n, const FixedLane& a,
                             const FixedLane& b) {
  check_dual_lanes(a, b);
  HWY_DYNAMIC_DISPATCH(ViterbiFixedDual)(t, step0, n, a, b);
}

void quantize_samples_simd(const FixedAcsTables& t, const float* y, size_t n, int16_t* yq) {
  HWY_DYNAMIC_DISPATCH(QuantizeSamples)(t, y, n, yq);
}

const char* simd_target_name() { return HWY_DYNAMIC_DISPATCH(TargetName)(); }

}  // namespace salvor::trellis
#endif  // HWY_ONCE
