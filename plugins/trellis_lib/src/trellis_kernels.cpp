// Scalar references of the trellis kernels (see trellis/kernels.hpp). The SIMD versions
// in trellis_kernels_simd.cpp must give exactly these results.
#include <algorithm>
#include <cmath>
#include <limits>

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
    float high = 0.0f;
    if ((k + 1) % kRenormInterval == 0 || k + 1 == n) {
      high = next[0];
      for (int s = 1; s < S; ++s) high = std::max(high, next[s]);
    }
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
    float high = 0.0f;
    if (done % kRenormInterval == 0 || k == 0) {
      high = prev[0];
      for (int p = 1; p < S; ++p) high = std::max(high, prev[p]);
    }
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
