#pragma once
// Cubic Lagrange interpolation in Farrow form.
//
// Literature: C. W. Farrow, "A continuously variable digital delay element", Proc. IEEE
// ISCAS 1988, pp. 2641-2645; L. Erup, F. M. Gardner & R. A. Harris, "Interpolation in
// digital modems, part II: implementation and performance", IEEE Trans. Commun.
// 41(6):998-1008, 1993.
//
// The value at m + mu (0 <= mu < 1) is taken from the four samples x[m-1], x[m], x[m+1],
// x[m+2]. The Lagrange weights are cubic polynomials in mu; the Farrow form evaluates
// them as a Horner polynomial whose coefficients are fixed FIR combinations of the four
// samples, so one set of four dot products serves any mu.

#include <array>

namespace salvor::timing {

// Lagrange weights [C-1, C0, C1, C2] applied to [x[m-1], x[m], x[m+1], x[m+2]].
std::array<double, 4> cubic_lagrange_weights(double mu);

// The interpolated value at m + mu from x4 = {x[m-1], x[m], x[m+1], x[m+2]}, Farrow form.
// Inline: the PLL calls it twice per bit. The rows are the Lagrange weights expanded by
// powers of mu; the thirds and sixths are multiplications (a division costs several times
// more and the PLL does not need the last bit of the rounding).
inline double farrow_cubic(const std::array<double, 4>& x, double mu) {
  constexpr double third = 1.0 / 3.0, sixth = 1.0 / 6.0;
  const double v0 = x[1];
  const double v1 = -x[0] * third - 0.5 * x[1] + x[2] - x[3] * sixth;
  const double v2 = 0.5 * (x[0] + x[2]) - x[1];
  const double v3 = (x[3] - x[0]) * sixth + 0.5 * (x[1] - x[2]);
  // Estrin's order: mu^2 and the two halves side by side, three dependent steps after mu
  // instead of Horner's six (mu is on the PLL's bit-to-bit path).
  const double mu2 = mu * mu;
  return (v1 * mu + v0) + (v3 * mu + v2) * mu2;
}

}  // namespace salvor::timing
