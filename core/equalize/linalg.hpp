#pragma once
// Small dense linear algebra for the equalizer designs (at most 31 x 31): a row-major
// matrix and a Cholesky solver for symmetric positive definite systems (Golub & Van Loan,
// Matrix Computations, 4th ed., Algorithm 4.2.1). No external dependency is worth it here.

#include <cstddef>
#include <string>
#include <vector>

namespace salvor::equalize {

struct Matrix {
  size_t rows = 0, cols = 0;
  std::vector<double> data;  // row-major
  Matrix() = default;
  Matrix(size_t r, size_t c) : rows(r), cols(c), data(r * c, 0.0) {}
  double& operator()(size_t r, size_t c) { return data[r * cols + c]; }
  double operator()(size_t r, size_t c) const { return data[r * cols + c]; }
};

// Solves A x = b for symmetric positive definite A (only the lower triangle is read).
// Throws salvor::Error(input, what, ...) when A is not positive definite: `what` names the
// system (e.g. "equalizer training statistics") so the message says what lacked excitation.
std::vector<double> solve_spd(const Matrix& a, const std::vector<double>& b, const std::string& what);

// Solves A X = B column by column (A symmetric positive definite).
Matrix solve_spd(const Matrix& a, const Matrix& b, const std::string& what);

}  // namespace salvor::equalize
