#include "timing/prefilter.hpp"

#include <cmath>
#include <utility>

#include "common/error.hpp"

namespace salvor::timing {

double lorentzian_transition(double x, double pw50) {
  const double u = 2.0 * x / pw50;
  return 1.0 / (1.0 + u * u);
}

double prefiltered_transition(const std::vector<double>& w, double pw50, double x) {
  double acc = 0.0;
  for (size_t i = 0; i < w.size(); ++i) acc += w[i] * lorentzian_transition(x - double(i), pw50);
  return acc;
}

namespace {
// Solves A x = b (n x n, row-major) by Gaussian elimination with partial pivoting.
std::vector<double> solve_dense(std::vector<double> a, std::vector<double> b, int n) {
  for (int col = 0; col < n; ++col) {
    int piv = col;
    for (int r = col + 1; r < n; ++r)
      if (std::fabs(a[r * n + col]) > std::fabs(a[piv * n + col])) piv = r;
    if (std::fabs(a[piv * n + col]) < 1e-300) throw_internal("prefilter design: singular system");
    if (piv != col) {
      for (int c = 0; c < n; ++c) std::swap(a[col * n + c], a[piv * n + c]);
      std::swap(b[col], b[piv]);
    }
    for (int r = col + 1; r < n; ++r) {
      const double f = a[r * n + col] / a[col * n + col];
      for (int c = col; c < n; ++c) a[r * n + c] -= f * a[col * n + c];
      b[r] -= f * b[col];
    }
  }
  std::vector<double> x(n);
  for (int r = n - 1; r >= 0; --r) {
    double s = b[r];
    for (int c = r + 1; c < n; ++c) s -= a[r * n + c] * x[c];
    x[r] = s / a[r * n + r];
  }
  return x;
}
}  // namespace

std::vector<double> design_epr4_prefilter(double pw50, int taps, double ridge) {
  if (!(pw50 > 0.2 && pw50 < 8.0)) {
    throw_usage("timing loop", "pw50_bits " + std::to_string(pw50) + " is outside (0.2, 8)");
  }
  if (taps < 3 || taps % 2 == 0 || taps > 63) {
    throw_usage("timing loop", "prefilter taps " + std::to_string(taps) + " must be odd, 3..63");
  }
  const int centre = (taps - 1) / 2;
  // Output samples n over a span wide enough to hold the Lorentzian tails.
  const int span = 48;
  std::vector<double> ata(taps * taps, 0.0), atb(taps, 0.0);
  for (int n = -span; n < taps + span; ++n) {
    double target = 0.0;
    if (n == centre) target = 1.0;
    if (n == centre - 1 || n == centre + 1) target = 0.5;
    for (int i = 0; i < taps; ++i) {
      const double hi = lorentzian_transition(double(n - i), pw50);
      atb[i] += hi * target;
      for (int j = 0; j < taps; ++j) ata[i * taps + j] += hi * lorentzian_transition(double(n - j), pw50);
    }
  }
  for (int i = 0; i < taps; ++i) ata[i * taps + i] += ridge;
  return solve_dense(std::move(ata), std::move(atb), taps);
}

}  // namespace salvor::timing
