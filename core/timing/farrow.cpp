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

}  // namespace salvor::timing
