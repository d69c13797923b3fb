#include "equalize/linalg.hpp"

#include <cmath>

#include "common/error.hpp"

namespace salvor::equalize {

namespace {

// Lower-triangular Cholesky factor L with A = L L^T.
Matrix cholesky(const Matrix& a, const std::string& what) {
  if (a.rows != a.cols || a.rows == 0) throw_internal(what + ": cholesky of a non-square matrix");
  const size_t n = a.rows;
  Matrix l(n, n);
  // Relative pivot floor: a pivot this small means the data did not excite this direction.
  double scale = 0.0;
  for (size_t i = 0; i < n; ++i) scale = std::fmax(scale, std::fabs(a(i, i)));
  const double floor = scale * 1e-13;
  for (size_t j = 0; j < n; ++j) {
    double d = a(j, j);
    for (size_t k = 0; k < j; ++k) d -= l(j, k) * l(j, k);
    if (!(d > floor) || !std::isfinite(d)) {
      throw_input(what, "matrix is not positive definite (pivot " + std::to_string(j) +
                            "): the data does not excite every tap; use longer or richer training data");
    }
    l(j, j) = std::sqrt(d);
    for (size_t i = j + 1; i < n; ++i) {
      double s = a(i, j);
      for (size_t k = 0; k < j; ++k) s -= l(i, k) * l(j, k);
      l(i, j) = s / l(j, j);
    }
  }
  return l;
}

std::vector<double> back_substitute(const Matrix& l, std::vector<double> b) {
  const size_t n = l.rows;
  for (size_t i = 0; i < n; ++i) {  // L z = b
    double s = b[i];
    for (size_t k = 0; k < i; ++k) s -= l(i, k) * b[k];
    b[i] = s / l(i, i);
  }
  for (size_t i = n; i-- > 0;) {  // L^T x = z
    double s = b[i];
    for (size_t k = i + 1; k < n; ++k) s -= l(k, i) * b[k];
    b[i] = s / l(i, i);
  }
  return b;
}

}  // namespace

std::vector<double> solve_spd(const Matrix& a, const std::vector<double>& b, const std::string& what) {
  if (b.size() != a.rows) throw_internal(what + ": right-hand side has the wrong length");
  return back_substitute(cholesky(a, what), b);
}

Matrix solve_spd(const Matrix& a, const Matrix& b, const std::string& what) {
  if (b.rows != a.rows) throw_internal(what + ": right-hand side has the wrong shape");
  const Matrix l = cholesky(a, what);
  Matrix x(b.rows, b.cols);
  for (size_t c = 0; c < b.cols; ++c) {
    std::vector<double> col(b.rows);
    for (size_t r = 0; r < b.rows; ++r) col[r] = b(r, c);
    col = back_substitute(l, std::move(col));
    for (size_t r = 0; r < b.rows; ++r) x(r, c) = col[r];
  }
  return x;
}

}  // namespace salvor::equalize
