#include "timing/farrow.hpp"

namespace salvor::timing {

std::array<double, 4> cubic_lagrange_weights(double mu) {
  // Lagrange basis on the nodes -1, 0, 1, 2 evaluated at mu.
  return {
      -mu * (mu - 1.0) * (mu - 2.0) / 6.0,
      (mu + 1.0) * (mu - 1.0) * (mu - 2.0) / 2.0,
      -(mu + 1.0) * mu * (mu - 2.0) / 2.0,
      (mu + 1.0) * mu * (mu - 1.0) / 6.0,
  };
}

double farrow_cubic(const std::array<double, 4>& x, double mu) {
  // Farrow rows: the coefficients of mu^0..mu^3 as combinations of x[m-1..m+2]
  // (expanding the Lagrange weights above by powers of mu).
  const double v0 = x[1];
  const double v1 = -x[0] / 3.0 - x[1] / 2.0 + x[2] - x[3] / 6.0;
  const double v2 = x[0] / 2.0 - x[1] + x[2] / 2.0;
  const double v3 = -x[0] / 6.0 + x[1] / 2.0 - x[2] / 2.0 + x[3] / 6.0;
  return ((v3 * mu + v2) * mu + v1) * mu + v0;
}

}  // namespace salvor::timing
