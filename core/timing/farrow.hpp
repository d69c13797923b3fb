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
double farrow_cubic(const std::array<double, 4>& x4, double mu);

}  // namespace salvor::timing
