#pragma once
// Noise models for noise-predictive trellis detectors, and their estimators.
//
// Linear prediction of the equalized noise n_k = y_k - (f*x)_k from its own past,
// n_k ~ sum_i p_i n_(k-i) + e_k: the Yule-Walker equations solved by the Levinson-Durbin
// recursion (N. Levinson, J. Math. Phys. 25:261-278, 1947; J. Durbin, Rev. Int. Stat.
// Inst. 28:233-244, 1960), as used by NPML (Coker, Eleftheriou, Galbraith & Hirt,
// IEEE Trans. Magn. 34(1):110-117, 1998).
//
// Pattern-dependent prediction: one predictor, bias and prediction-error variance per
// local data pattern (Kavcic & Moura, IEEE Trans. IT 46(1):291-301, 2000; Moon & Park,
// IEEE JSAC 19(4):730-743, 2001), estimated by least squares per pattern.

#include <cstddef>
#include <span>
#include <vector>

namespace salvor::trellis {

inline constexpr int kMaxPredictorOrder = 4;

struct LinearPredictor {
  std::vector<double> coef;     // p_1..p_N: weight of n_(k-1) first
  double error_variance = 0.0;  // E[e_k^2]
};

// Levinson-Durbin on autocorrelation r[0..order]. If the recursion meets a reflection
// coefficient of magnitude >= 1 (not positive definite), it stops at the lower order.
LinearPredictor levinson_durbin(std::span<const double> r, int order);

// Accumulates the autocorrelation of a noise sequence for a predictor of `order`.
class PredictorEstimator {
 public:
  explicit PredictorEstimator(int order);
  // n_k and its past n_(k-1), n_(k-2), ... (newest first, at least `order` values).
  void add(double n_k, std::span<const double> past);
  size_t count() const { return count_; }
  LinearPredictor solve() const;  // requires count() > 0
  void clear();

 private:
  int order_;
  std::vector<double> sums_;  // sum n_k n_(k-i), i = 0..order
  size_t count_ = 0;
};

struct PatternNoiseModel {
  int order = 0;         // predictor order N (0: variance and bias only)
  int pattern_bits = 0;  // patterns = 2^pattern_bits
  std::vector<double> coef;     // [pattern * order + i]: weight of n_(k-1-i)
  std::vector<double> bias;     // mean of the prediction error per pattern
  std::vector<double> variance; // prediction-error variance per pattern
  std::vector<double> inv_variance;
  std::vector<double> log_variance;
  std::vector<size_t> samples;  // how many samples each pattern was estimated from
};

class PatternPredictorEstimator {
 public:
  PatternPredictorEstimator(int order, int pattern_bits);
  void add(int pattern, double n_k, std::span<const double> past);
  size_t count() const { return total_; }
  // Patterns seen fewer than `min_count` times take the pooled (all-pattern) model.
  PatternNoiseModel solve(size_t min_count) const;  // requires count() > 0
  void clear();

 private:
  int order_, pattern_bits_, dim_;  // dim = order + 2: [n_k, past..., 1]
  std::vector<double> sums_;        // per pattern dim x dim sums of z z^T
  std::vector<size_t> counts_;
  size_t total_ = 0;
};

}  // namespace salvor::trellis
