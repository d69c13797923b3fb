#include "trellis/noise_model.hpp"

#include <algorithm>
#include <cmath>

#include "common/error.hpp"

namespace salvor::trellis {

LinearPredictor levinson_durbin(std::span<const double> r, int order) {
  if (order < 0 || static_cast<int>(r.size()) < order + 1)
    throw_internal("levinson_durbin: autocorrelation shorter than order + 1");
  LinearPredictor out;
  out.coef.assign(order, 0.0);
  if (!(r[0] > 0.0)) {
    out.error_variance = std::max(r[0], 0.0);
    return out;
  }
  std::vector<double> a(order + 1, 0.0), prev(order + 1, 0.0);  // a[i] = p_i
  double err = r[0];
  for (int m = 1; m <= order; ++m) {
    double acc = r[m];
    for (int i = 1; i < m; ++i) acc -= a[i] * r[m - i];
    const double k = acc / err;
    if (!(std::abs(k) < 1.0)) break;  // not positive definite: keep order m-1
    prev = a;
    a[m] = k;
    for (int i = 1; i < m; ++i) a[i] = prev[i] - k * prev[m - i];
    err *= (1.0 - k * k);
  }
  for (int i = 0; i < order; ++i) out.coef[i] = a[i + 1];
  out.error_variance = err;
  return out;
}

PredictorEstimator::PredictorEstimator(int order) : order_(order), sums_(order + 1, 0.0) {
  if (order < 0 || order > kMaxPredictorOrder)
    throw_usage("predictor_order", "value " + std::to_string(order) + " is outside 0.." +
                                       std::to_string(kMaxPredictorOrder));
}

void PredictorEstimator::add(double n_k, std::span<const double> past) {
  sums_[0] += n_k * n_k;
  for (int i = 1; i <= order_; ++i) sums_[i] += n_k * past[i - 1];
  ++count_;
}

LinearPredictor PredictorEstimator::solve() const {
  if (count_ == 0) throw_internal("predictor estimate without samples");
  std::vector<double> r(order_ + 1);
  for (int i = 0; i <= order_; ++i) r[i] = sums_[i] / static_cast<double>(count_);
  return levinson_durbin(r, order_);
}

void PredictorEstimator::clear() {
  std::fill(sums_.begin(), sums_.end(), 0.0);
  count_ = 0;
}

PatternPredictorEstimator::PatternPredictorEstimator(int order, int pattern_bits)
    : order_(order), pattern_bits_(pattern_bits), dim_(order + 2) {
  if (order < 0 || order > kMaxPredictorOrder)
    throw_usage("predictor_order", "value " + std::to_string(order) + " is outside 0.." +
                                       std::to_string(kMaxPredictorOrder));
  if (pattern_bits < 1 || pattern_bits > 6)
    throw_usage("pattern_length", "value " + std::to_string(pattern_bits) + " is outside 1..6");
  sums_.assign((size_t{1} << pattern_bits) * dim_ * dim_, 0.0);
  counts_.assign(size_t{1} << pattern_bits, 0);
}

void PatternPredictorEstimator::add(int pattern, double n_k, std::span<const double> past) {
  double z[kMaxPredictorOrder + 2];
  z[0] = n_k;
  for (int i = 0; i < order_; ++i) z[1 + i] = past[i];
  z[dim_ - 1] = 1.0;
  double* S = &sums_[static_cast<size_t>(pattern) * dim_ * dim_];
  for (int a = 0; a < dim_; ++a)
    for (int b = 0; b < dim_; ++b) S[a * dim_ + b] += z[a] * z[b];
  ++counts_[pattern];
  ++total_;
}

namespace {

// Least squares of z0 on z1..z(dim-1) from the sums S = sum z z^T (Gaussian elimination
// with partial pivoting; dim <= 6). Returns the weights and the residual mean square.
bool regress(const double* S, int dim, double count, std::vector<double>* w, double* mse) {
  const int n = dim - 1;
  double A[kMaxPredictorOrder + 1][kMaxPredictorOrder + 2];
  for (int a = 0; a < n; ++a) {
    for (int b = 0; b < n; ++b) A[a][b] = S[(a + 1) * dim + (b + 1)];
    A[a][n] = S[(a + 1) * dim + 0];
    A[a][a] += 1e-12 * (S[0] + 1.0);  // ridge against an exactly singular design
  }
  for (int c = 0; c < n; ++c) {
    int piv = c;
    for (int r = c + 1; r < n; ++r)
      if (std::abs(A[r][c]) > std::abs(A[piv][c])) piv = r;
    if (!(std::abs(A[piv][c]) > 0.0)) return false;
    if (piv != c)
      for (int b = 0; b <= n; ++b) std::swap(A[c][b], A[piv][b]);
    for (int r = 0; r < n; ++r) {
      if (r == c) continue;
      const double f = A[r][c] / A[c][c];
      for (int b = c; b <= n; ++b) A[r][b] -= f * A[c][b];
    }
  }
  w->assign(n, 0.0);
  for (int a = 0; a < n; ++a) (*w)[a] = A[a][n] / A[a][a];
  // residual sum of squares = S00 - 2 w.S_r0 + w^T S_rr w
  double rss = S[0];
  for (int a = 0; a < n; ++a) {
    rss -= 2.0 * (*w)[a] * S[(a + 1) * dim];
    for (int b = 0; b < n; ++b) rss += (*w)[a] * (*w)[b] * S[(a + 1) * dim + (b + 1)];
  }
  *mse = std::max(rss, 0.0) / count;
  return std::isfinite(*mse);
}

}  // namespace

PatternNoiseModel PatternPredictorEstimator::solve(size_t min_count) const {
  if (total_ == 0) throw_internal("pattern noise estimate without samples");
  const size_t n_patterns = counts_.size();
  PatternNoiseModel m;
  m.order = order_;
  m.pattern_bits = pattern_bits_;
  m.coef.assign(n_patterns * order_, 0.0);
  m.bias.assign(n_patterns, 0.0);
  m.variance.assign(n_patterns, 0.0);
  m.samples = counts_;
  // Pooled model: the fallback for rare patterns and the variance floor.
  std::vector<double> pooled(dim_ * dim_, 0.0);
  for (size_t p = 0; p < n_patterns; ++p)
    for (int i = 0; i < dim_ * dim_; ++i) pooled[i] += sums_[p * dim_ * dim_ + i];
  std::vector<double> w_pooled;
  double mse_pooled = 0.0;
  if (!regress(pooled.data(), dim_, static_cast<double>(total_), &w_pooled, &mse_pooled))
    throw_internal("pooled noise regression is singular");
  const double floor = std::max(1e-6 * mse_pooled, 1e-12);
  for (size_t p = 0; p < n_patterns; ++p) {
    std::vector<double> w = w_pooled;
    double mse = mse_pooled;
    if (counts_[p] >= std::max<size_t>(min_count, dim_ + 1)) {
      std::vector<double> wp;
      double msep;
      if (regress(&sums_[p * dim_ * dim_], dim_, static_cast<double>(counts_[p]), &wp, &msep)) {
        w = wp;
        mse = msep;
      }
    }
    for (int i = 0; i < order_; ++i) m.coef[p * order_ + i] = w[i];
    m.bias[p] = w[order_];
    m.variance[p] = std::max(mse, floor);
  }
  m.inv_variance.resize(n_patterns);
  m.log_variance.resize(n_patterns);
  for (size_t p = 0; p < n_patterns; ++p) {
    m.inv_variance[p] = 1.0 / m.variance[p];
    m.log_variance[p] = std::log(m.variance[p]);
  }
  return m;
}

void PatternPredictorEstimator::clear() {
  std::fill(sums_.begin(), sums_.end(), 0.0);
  std::fill(counts_.begin(), counts_.end(), 0);
  total_ = 0;
}

}  // namespace salvor::trellis
