// Scalar references of the trellis kernels (see trellis/kernels.hpp). The SIMD versions
// in trellis_kernels_simd.cpp must give exactly these results.
#include <algorithm>
#include <cmath>
#include <initializer_list>
#include <limits>
#include <stdexcept>
#include <string>
#include <utility>

#include "trellis/kernels.hpp"

namespace salvor::trellis {

void viterbi_euclidean_scalar(const EuclideanAcs& t, float* pm, size_t phase, const float* y,
                              const uint8_t* erased, size_t n, uint32_t* decisions,
                              float* delta) {
  const int S = t.states, half = S / 2;
  float next[32];
  for (size_t k = 0; k < n; ++k) {
    const bool er = erased != nullptr && erased[k] != 0;
    uint32_t bits = 0;
    for (int s = 0; s < S; ++s) {
      float v0 = pm[s >> 1], v1 = pm[(s >> 1) + half];
      if (!er) {
        const float e0 = y[k] - t.out0[s], e1 = y[k] - t.out1[s];
        v0 = v0 + e0 * e0;
        v1 = v1 + e1 * e1;
      }
      const bool take1 = v1 < v0;  // ties keep branch 0
      next[s] = take1 ? v1 : v0;
      bits |= static_cast<uint32_t>(take1) << s;
      if (delta) delta[k * S + s] = std::fabs(v0 - v1);
    }
    if ((phase + k + 1) % kRenormInterval == 0) {
      float low = next[0];
      for (int s = 1; s < S; ++s) low = std::min(low, next[s]);
      for (int s = 0; s < S; ++s) pm[s] = next[s] - low;
    } else {
      for (int s = 0; s < S; ++s) pm[s] = next[s];
    }
    decisions[k] = bits;
  }
}

void viterbi_predictive_scalar(const PredictiveAcs& t, float* pm, float* hist, size_t phase,
                               const float* y, const uint8_t* erased, size_t n,
                               uint32_t* decisions, float* delta) {
  const int S = t.states, half = S / 2, N = t.order;
  float next[32], next_hist[kMaxOrder * 32];
  for (size_t k = 0; k < n; ++k) {
    const bool er = erased != nullptr && erased[k] != 0;
    uint32_t bits = 0;
    for (int s = 0; s < S; ++s) {
      const int pred[2] = {s >> 1, (s >> 1) + half};
      float v[2];
      for (int j = 0; j < 2; ++j) {
        const int p = pred[j];
        v[j] = pm[p];
        if (!er) {
          float e = (y[k] - t.out[j][s]) - t.bias[j][s];
          for (int i = 0; i < N; ++i) e = e - t.coef[j][i * S + s] * hist[i * S + p];
          v[j] = v[j] + (t.log_var[j][s] + (e * e) * t.inv_var[j][s]);
        }
      }
      const bool take1 = v[1] < v[0];  // ties keep branch 0
      next[s] = take1 ? v[1] : v[0];
      bits |= static_cast<uint32_t>(take1) << s;
      if (delta) delta[k * S + s] = std::fabs(v[0] - v[1]);
      if (N > 0) {
        const int p = pred[take1];
        next_hist[s] = er ? 0.0f : y[k] - t.out[take1][s];
        for (int i = 1; i < N; ++i) next_hist[i * S + s] = hist[(i - 1) * S + p];
      }
    }
    if ((phase + k + 1) % kRenormInterval == 0) {
      float low = next[0];
      for (int s = 1; s < S; ++s) low = std::min(low, next[s]);
      for (int s = 0; s < S; ++s) pm[s] = next[s] - low;
    } else {
      for (int s = 0; s < S; ++s) pm[s] = next[s];
    }
    for (int i = 0; i < N * S; ++i) hist[i] = next_hist[i];
    decisions[k] = bits;
  }
}

void maxlog_forward_scalar(const MaxLogTables& t, const float* alpha_in, const float* y,
                           const uint8_t* erased, size_t n, float* alpha_out) {
  const int S = t.states, half = S / 2;
  float next[32];
  for (size_t k = 0; k < n; ++k) {
    const float* a = k == 0 ? alpha_in : alpha_out + (k - 1) * S;
    const bool er = erased != nullptr && erased[k] != 0;
    for (int s = 0; s < S; ++s) {
      float v0 = a[s >> 1], v1 = a[(s >> 1) + half];
      if (!er) {
        const float e0 = y[k] - t.out0[s], e1 = y[k] - t.out1[s];
        v0 = v0 - e0 * e0;
        v1 = v1 - e1 * e1;
      }
      next[s] = std::max(v0, v1);
    }
    const float high = ((k + 1) % kRenormInterval == 0 || k + 1 == n) ? next[0] : 0.0f;
    for (int s = 0; s < S; ++s) alpha_out[k * S + s] = next[s] - high;
  }
}

void maxlog_backward_scalar(const MaxLogTables& t, const float* alpha_in, const float* alpha,
                            const float* y, const uint8_t* erased, size_t n, size_t n_llr,
                            float* beta, float* raw, uint16_t* best_branch) {
  const int S = t.states, half = S / 2;
  const float neg_inf = -std::numeric_limits<float>::infinity();
  float g[2][32], prev[32];
  for (size_t k = n; k-- > 0;) {
    const size_t done = n - k;  // steps of this call including k
    const bool er = erased != nullptr && erased[k] != 0;
    for (int s = 0; s < S; ++s) {
      const float e0 = y[k] - t.out0[s], e1 = y[k] - t.out1[s];
      g[0][s] = er ? 0.0f : e0 * e0;
      g[1][s] = er ? 0.0f : e1 * e1;
    }
    if (k < n_llr) {
      const float* a = k == 0 ? alpha_in : alpha + (k - 1) * S;
      float best1 = neg_inf, best0 = neg_inf, best = neg_inf;
      int arg = 0;
      for (int j = 0; j < 2; ++j) {
        const uint8_t* nrzi = j ? t.nrzi1 : t.nrzi0;
        for (int s = 0; s < S; ++s) {
          const float v = (a[(s >> 1) + j * half] - g[j][s]) + beta[s];
          if (nrzi[s]) best1 = std::max(best1, v);
          else best0 = std::max(best0, v);
          if (v > best) {
            best = v;
            arg = j * S + s;
          }
        }
      }
      raw[k] = best1 - best0;
      if (best_branch) best_branch[k] = static_cast<uint16_t>(arg);
    }
    // Predecessor p is left by branch j = [p >= S/2] into states 2p mod S and 2p+1 mod S.
    for (int p = 0; p < S; ++p) {
      const int j = p >= half, s = (2 * p) % S;
      prev[p] = std::max(beta[s] - g[j][s], beta[s + 1] - g[j][s + 1]);
    }
    const float high = (done % kRenormInterval == 0 || k == 0) ? prev[0] : 0.0f;
    for (int p = 0; p < S; ++p) beta[p] = prev[p] - high;
  }
}

namespace {
// NRZI bit of the branch with index j into state s: x_t xor x_(t-1) of the branch word.
inline unsigned nrzi_of(unsigned s, unsigned j, int m) {
  const unsigned word = s | (j << m);
  return (word ^ (word >> 1)) & 1u;
}
}  // namespace

void sova_scalar(const SovaPath& p, size_t last, size_t window, float* rel) {
  const int m = p.memory;
  for (size_t t = last; t-- > 0;) {
    const float d = p.delta[t];
    if (!(d < std::numeric_limits<float>::infinity())) continue;
    const unsigned st = p.state[t], jc = 1u - p.branch[t];
    if (nrzi_of(st, jc, m) != p.bit[t]) rel[t] = std::min(rel[t], d);
    unsigned c = (st >> 1) | (jc << (m - 1));
    const size_t stop = t + 1 > window ? t + 1 - window : 0;
    for (size_t u = t; u-- > stop;) {
      if (c == p.state[u]) break;  // merged: the rest agrees
      const unsigned jj = (p.decisions[u] >> c) & 1u;
      if (nrzi_of(c, jj, m) != p.bit[u]) rel[u] = std::min(rel[u], d);
      c = (c >> 1) | (jj << (m - 1));
    }
  }
}

}  // namespace salvor::trellis

// ---- fixed-point Euclidean add-compare-select and the traceback -----------------------

namespace salvor::trellis {

namespace {

int reverse_bits(int v, int bits) {
  int r = 0;
  for (int i = 0; i < bits; ++i) r |= ((v >> i) & 1) << (bits - 1 - i);
  return r;
}

int rotate_left(int v, int by, int bits) {
  by %= bits;
  const int mask = (1 << bits) - 1;
  return ((v << by) | (v >> (bits - by))) & mask;
}

// The S-bit word repeated to fill 64 bits (S = 2..32).
uint64_t repeated(uint64_t word, int states) {
  uint64_t w = 0;
  for (int i = 0; i < 64; i += states) w |= word << i;
  return w;
}

}  // namespace

FixedAcsTables make_fixed_acs(int memory, const double* out0, const double* out1) {
  if (memory < 1 || memory > 5)
    throw std::invalid_argument("make_fixed_acs: memory " + std::to_string(memory) +
                                " is outside 1..5");
  FixedAcsTables t;
  const int S = 1 << memory, m = memory;
  t.states = S;
  t.memory = m;
  double largest = 0.0;
  for (int s = 0; s < S; ++s) largest = std::max({largest, std::fabs(out0[s]), std::fabs(out1[s])});
  if (!(largest > 0.0) || !std::isfinite(largest))
    throw std::invalid_argument("make_fixed_acs: branch outputs are all zero or not finite");
  t.gain = static_cast<float>(kFixedOutputRange / largest);
  t.metric_unit = static_cast<float>((1 << kFixedMetricShift) / (double{t.gain} * t.gain));
  for (int j = 0; j < 2; ++j) {
    t.out[j].resize(S);
    const double* o = j ? out1 : out0;
    for (int s = 0; s < S; ++s)
      t.out[j][s] = static_cast<int16_t>(std::nearbyint(o[s] * double{t.gain}) * kFixedScale);
  }
  t.lane_state.resize(static_cast<size_t>(m) * S);
  t.own_out.resize(static_cast<size_t>(m) * S);
  t.partner_out.resize(static_cast<size_t>(m) * S);
  t.mask_bytes = (S + 7) / 8;
  t.trace_word.assign(static_cast<size_t>(m) * t.mask_bytes * 256, 0);
  for (int p = 0; p < m; ++p) {
    for (int l = 0; l < S; ++l) {
      // Before a step of phase p, lane l holds state rotl(l, p); after it, rotl(l, p + 1).
      const int own = rotate_left(l, p, m), ns = rotate_left(l, p + 1, m);
      const int j_own = ns & 1;  // the own predecessor's oldest level
      if ((own >> (m - 1)) != j_own || (own & (S / 2 - 1)) != (ns >> 1) ||
          fixed_lane_of(ns, p, m) != l)
        throw std::logic_error("make_fixed_acs: lane layout is inconsistent");
      t.lane_state[p * S + l] = static_cast<uint8_t>(ns);
      t.own_out[p * S + l] = t.out[j_own][ns];
      t.partner_out[p * S + l] = t.out[1 - j_own][ns];
    }
    for (int b = 0; b < t.mask_bytes; ++b)
      for (int v = 0; v < 256; ++v) {
        uint64_t word = 0;
        for (int i = 0; i < 8 && 8 * b + i < S; ++i) {
          const int ns = t.lane_state[p * S + 8 * b + i];
          // Partner chosen (bit set) means branch 1 - (ns & 1); otherwise branch ns & 1.
          const int take1 = ((v >> i) & 1) ^ (ns & 1);
          word |= static_cast<uint64_t>(take1) << reverse_bits(ns, m);
        }
        t.trace_word[(static_cast<size_t>(p) * t.mask_bytes + b) * 256 + v] = repeated(word, S);
      }
  }
  // The rows twice over, for the two-trellis kernel's vectors of 2 S lanes.
  for (const auto& [single, twice] : {std::pair{&t.own_out, &t.own_out2}, std::pair{&t.partner_out, &t.partner_out2}}) {
    twice->resize(2 * single->size());
    for (int p = 0; p < m; ++p)
      for (int i = 0; i < 2 * S; ++i) (*twice)[p * 2 * S + i] = (*single)[p * S + i % S];
  }
  return t;
}

void quantize_samples_scalar(const FixedAcsTables& t, const float* y, size_t n, int16_t* yq) {
  const float lim = kFixedSampleLimit;
  for (size_t i = 0; i < n; ++i) {
    const float v = std::min(std::max(y[i] * t.gain, -lim), lim);
    yq[i] = static_cast<int16_t>(static_cast<int>(std::nearbyint(v)) * kFixedScale);
  }
}

void viterbi_fixed_scalar(const FixedAcsTables& t, uint16_t* pm, size_t step0,
                          const int16_t* yq, const uint8_t* erased, size_t n,
                          uint64_t* decisions, uint16_t* delta) {
  const int S = t.states, half = S / 2, m = t.memory;
  uint16_t next[32];
  int rev[32];
  for (int s = 0; s < S; ++s) rev[s] = reverse_bits(s, m);
  // Both held times 64, so (64 e_q)^2 >> 16 = e_q^2 >> 4.
  auto metric = [](int e) { return static_cast<uint32_t>(e * e) >> 16; };
  auto sat = [](uint32_t v) { return static_cast<uint16_t>(std::min<uint32_t>(v, 0xffff)); };
  for (size_t k = 0; k < n; ++k) {
    const bool er = erased != nullptr && erased[k] != 0;
    const int phase = static_cast<int>((step0 + k) % static_cast<size_t>(m));
    uint64_t bits = 0;
    for (int s = 0; s < S; ++s) {
      uint16_t c0 = pm[s >> 1], c1 = pm[(s >> 1) + half];
      if (!er) {
        c0 = sat(c0 + metric(yq[k] - t.out[0][s]));
        c1 = sat(c1 + metric(yq[k] - t.out[1][s]));
      }
      const bool take1 = c1 < c0 || (c1 == c0 && (s & 1) == 0);
      next[s] = std::min(c0, c1);
      bits |= static_cast<uint64_t>(take1) << rev[s];
      if (delta)
        delta[k * S + fixed_lane_of(s, phase, m)] = static_cast<uint16_t>(c0 > c1 ? c0 - c1 : c1 - c0);
    }
    if ((step0 + k + 1) % kRenormInterval == 0) {
      uint16_t low = next[0];
      for (int s = 1; s < S; ++s) low = std::min(low, next[s]);
      for (int s = 0; s < S; ++s) pm[s] = static_cast<uint16_t>(next[s] - low);
    } else {
      for (int s = 0; s < S; ++s) pm[s] = next[s];
    }
    decisions[k] = repeated(bits, S);
  }
}

void check_dual_lanes(const FixedLane& a, const FixedLane& b) {
  if ((a.delta == nullptr) != (b.delta == nullptr))
    throw std::invalid_argument("viterbi_fixed_dual: delta must be given for both lanes or for neither");
}

void viterbi_fixed_dual_scalar(const FixedAcsTables& t, size_t step0, size_t n, const FixedLane& a,
                               const FixedLane& b) {
  check_dual_lanes(a, b);
  for (const FixedLane* l : {&a, &b})
    viterbi_fixed_scalar(t, l->pm, step0, l->yq, l->erased, n, l->decisions, l->delta);
}

namespace {

// One traceback step: r <- 2 r + (bit r mod 64 of d). The decision words repeat every S
// bits, so bit (r mod 64) is the decision of the state whose bit-reverse is r mod S.
inline uint64_t trace_step(uint64_t r, uint64_t d) {
#if defined(__x86_64__) && defined(__GNUC__)
  asm("btq %[r], %[d]\n\tadcq %[r], %[r]" : [r] "+r"(r) : [d] "r"(d) : "cc");
  return r;
#else
  return (r << 1) | ((d >> (r & 63)) & 1u);
#endif
}

}  // namespace

namespace {

// Steps t = begin + count - 1 .. begin, the word of step t at dec[t - begin]; stores r
// into levels[t / 64] whenever t is a multiple of 64.
void trace_range(const uint64_t* dec, size_t begin, size_t count, uint64_t& r,
                 uint64_t* levels) {
  size_t i = count;  // steps left; the next is begin + i - 1
  while (i > 0 && (begin + i) % 64 != 0) {
    r = trace_step(r, dec[--i]);
    if ((begin + i) % 64 == 0) levels[(begin + i) / 64] = r;
  }
  while (i >= 64) {
    i -= 64;
    const uint64_t* d = dec + i;
    for (int k = 63; k >= 0; --k) r = trace_step(r, d[k]);
    levels[(begin + i) / 64] = r;
  }
  while (i > 0) {
    r = trace_step(r, dec[--i]);
    if ((begin + i) % 64 == 0) levels[(begin + i) / 64] = r;
  }
}

// Zeroes the words of `levels` past those a trace of n steps writes (word t / 64 for
// every step t that is a multiple of 64), which hold only the final state's levels.
void clear_untraced_words(size_t n, int memory, uint64_t* levels) {
  const size_t words = (n + static_cast<size_t>(memory) + 63) / 64;
  const size_t stored = n ? (n - 1) / 64 + 1 : 0;
  for (size_t w = stored; w < words; ++w) levels[w] = 0;
}

// The final state's levels, bits n .. n + memory - 1 (already there unless they spill into
// a word the trace did not write).
void set_final_levels(size_t n, int memory, int state, uint64_t* levels) {
  const int fin = reverse_bits(state, memory);
  for (int b = 0; b < memory; ++b) {
    const size_t i = n + static_cast<size_t>(b);
    const uint64_t bit = uint64_t{1} << (i % 64);
    levels[i / 64] = ((fin >> b) & 1) ? (levels[i / 64] | bit) : (levels[i / 64] & ~bit);
  }
}

}  // namespace

void trace_levels_ring(const uint64_t* ring, size_t ring_size, size_t head, size_t n,
                       int memory, int state, uint64_t* levels) {
  clear_untraced_words(n, memory, levels);
  uint64_t r = static_cast<uint64_t>(reverse_bits(state, memory));
  // Steps [0, first) sit at ring[head ..], the rest at ring[0 ..].
  const size_t first = std::min(n, ring_size - head);
  if (n > first) trace_range(ring, first, n - first, r, levels);
  trace_range(ring + head, 0, first, r, levels);
  set_final_levels(n, memory, state, levels);
}

void trace_levels(const uint64_t* decisions, size_t n, int memory, int state, uint64_t* levels) {
  trace_levels_ring(decisions, n, 0, n, memory, state, levels);
}

bool trace_levels_split(const uint64_t* decisions, size_t n, int memory, int state, size_t mid,
                        int mid_guess, uint64_t* levels) {
  if (mid == 0 || mid >= n) {
    trace_levels(decisions, n, memory, state, levels);
    return true;
  }
  clear_untraced_words(n, memory, levels);
  const uint64_t low = (uint64_t{1} << memory) - 1;
  const uint64_t guess = static_cast<uint64_t>(reverse_bits(mid_guess, memory));
  uint64_t r1 = static_cast<uint64_t>(reverse_bits(state, memory));
  uint64_t r2 = guess;
  // The two chains in one loop: each waits on its own bit test and add, so together they
  // take the time of the longer one.
  size_t t1 = n, t2 = mid;
  while (t1 > mid && t2 > 0) {
    r1 = trace_step(r1, decisions[--t1]);
    if (t1 % 64 == 0) levels[t1 / 64] = r1;
    r2 = trace_step(r2, decisions[--t2]);
    if (t2 % 64 == 0) levels[t2 / 64] = r2;
  }
  while (t1 > mid) {
    r1 = trace_step(r1, decisions[--t1]);
    if (t1 % 64 == 0) levels[t1 / 64] = r1;
  }
  const bool guessed = (r1 & low) == guess;
  if (!guessed) {
    // The guess was off the survivor: the first part again from the true state.
    uint64_t r = r1;
    trace_range(decisions, 0, mid, r, levels);
  } else {
    while (t2 > 0) {
      r2 = trace_step(r2, decisions[--t2]);
      if (t2 % 64 == 0) levels[t2 / 64] = r2;
    }
    // The word holding step mid: its steps below mid from the second chain, the rest
    // (steps mid .. , r1's bits) from the first.
    if (const size_t b = mid % 64; b != 0) {
      uint64_t& w = levels[mid / 64];
      w = (w & ((uint64_t{1} << b) - 1)) | (r1 << b);
    }
  }
  set_final_levels(n, memory, state, levels);
  return guessed;
}

TraceWordTable::TraceWordTable(int memory_) : memory(memory_) {
  const int S = 1 << memory, bytes = (S + 7) / 8;
  table.assign(static_cast<size_t>(bytes) * 256, 0);
  for (int b = 0; b < bytes; ++b)
    for (int v = 0; v < 256; ++v) {
      uint64_t word = 0;
      for (int i = 0; i < 8 && 8 * b + i < S; ++i)
        word |= static_cast<uint64_t>((v >> i) & 1) << reverse_bits(8 * b + i, memory);
      table[b * 256 + v] = repeated(word, S);
    }
}

uint32_t state_ordered_decisions(uint64_t trace_word, int memory) {
  const int S = 1 << memory;
  uint32_t bits = 0;
  for (int s = 0; s < S; ++s)
    bits |= static_cast<uint32_t>((trace_word >> reverse_bits(s, memory)) & 1u) << s;
  return bits;
}

}  // namespace salvor::trellis
