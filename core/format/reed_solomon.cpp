// Reed–Solomon encoder and errors-and-erasures decoder (literature in reed_solomon.hpp).
// Position j of an n-symbol word is the coefficient of x^(n-1-j); its locator is
// X_j = beta^(n-1-j) with beta = alpha^prim, so S_i = sum Y_j X_j^(fcr+i).

#include "format/reed_solomon.hpp"

#include <algorithm>
#include <numeric>

#include "common/error.hpp"

namespace salvor::format {

ReedSolomon::ReedSolomon(const ReedSolomonConfig& config)
    : config_(config), gf_(config.field_polynomial) {
  if (config.first_root < 0 || config.first_root > 254) {
    throw_usage("first_root", "fcr " + std::to_string(config.first_root) + " is outside 0..254");
  }
  if (config.primitive_element < 1 || config.primitive_element > 254 ||
      std::gcd(config.primitive_element, 255) != 1) {
    throw_usage("primitive_element", "prim " + std::to_string(config.primitive_element) +
                                         " must be in 1..254 and coprime to 255");
  }
  if (config.parity_symbols < 1 || config.parity_symbols > 254) {
    throw_usage("parity_symbols",
                "nroots " + std::to_string(config.parity_symbols) + " is outside 1..254");
  }
  if (config.length <= config.parity_symbols || config.length > 255) {
    throw_usage("length", "codeword length " + std::to_string(config.length) +
                              " must exceed the parity symbols and be at most 255");
  }
  // g(x) = prod_i (x - alpha^(prim*(fcr+i))), kept highest degree first.
  generator_.assign(1, 1);
  for (int i = 0; i < config.parity_symbols; ++i) {
    const uint8_t root = gf_.pow_alpha(config.primitive_element * (config.first_root + i));
    std::vector<uint8_t> next(generator_.size() + 1, 0);
    for (size_t d = 0; d < generator_.size(); ++d) {
      next[d] ^= generator_[d];                          // x * g
      next[d + 1] ^= gf_.mul(generator_[d], root);       // root * g
    }
    generator_ = std::move(next);
  }
}

void ReedSolomon::encode(std::span<const uint8_t> data, std::span<uint8_t> parity) const {
  const int nroots = config_.parity_symbols;
  if (static_cast<int>(data.size()) != k() || static_cast<int>(parity.size()) != nroots) {
    throw_internal("reed-solomon encode: wrong buffer sizes");
  }
  // Long division of data(x) * x^nroots by g(x): a shift register holding the remainder.
  std::fill(parity.begin(), parity.end(), 0);
  for (uint8_t d : data) {
    const uint8_t feedback = d ^ parity[0];
    for (int i = 0; i + 1 < nroots; ++i) parity[i] = parity[i + 1] ^ gf_.mul(feedback, generator_[i + 1]);
    parity[nroots - 1] = gf_.mul(feedback, generator_[nroots]);
  }
}

std::vector<uint8_t> ReedSolomon::encode(std::span<const uint8_t> data) const {
  std::vector<uint8_t> word(data.begin(), data.end());
  word.resize(config_.length);
  encode(data, std::span<uint8_t>(word).subspan(k()));
  return word;
}

bool ReedSolomon::syndromes(std::span<const uint8_t> word, std::vector<uint8_t>& s) const {
  s.assign(config_.parity_symbols, 0);
  bool all_zero = true;
  for (int i = 0; i < config_.parity_symbols; ++i) {
    const uint8_t point = gf_.pow_alpha(config_.primitive_element * (config_.first_root + i));
    uint8_t acc = 0;
    for (uint8_t r : word) acc = gf_.mul(acc, point) ^ r;  // Horner, symbol 0 first
    s[i] = acc;
    if (acc) all_zero = false;
  }
  return all_zero;
}

bool ReedSolomon::is_codeword(std::span<const uint8_t> word) const {
  if (static_cast<int>(word.size()) != config_.length) return false;
  std::vector<uint8_t> s;
  return syndromes(word, s);
}

RsDecodeResult ReedSolomon::decode(std::span<uint8_t> word, std::span<const int> erasure_positions) const {
  RsDecodeResult result;
  const int n = config_.length;
  const int nroots = config_.parity_symbols;
  const int prim = config_.primitive_element;
  if (static_cast<int>(word.size()) != n) return result;

  std::vector<int> erasures(erasure_positions.begin(), erasure_positions.end());
  std::sort(erasures.begin(), erasures.end());
  erasures.erase(std::unique(erasures.begin(), erasures.end()), erasures.end());
  for (int p : erasures) {
    if (p < 0 || p >= n) return result;  // not a position of this code
  }
  const int s_count = static_cast<int>(erasures.size());
  result.erasures = s_count;
  if (s_count > nroots) return result;

  std::vector<uint8_t> s;
  if (syndromes(word, s)) {
    result.ok = true;  // already a codeword: nothing to locate
    return result;
  }

  // Erasure locator Gamma(x) = prod (1 - X_j x); the polynomials below are lowest degree first.
  std::vector<uint8_t> lambda(nroots + 1, 0);
  lambda[0] = 1;
  for (int p : erasures) {
    const uint8_t x = gf_.pow_alpha(prim * (n - 1 - p));
    for (int d = s_count; d >= 1; --d) lambda[d] ^= gf_.mul(lambda[d - 1], x);
  }

  // Berlekamp–Massey started after the erasures (equivalent to BM on the Forney syndromes).
  std::vector<uint8_t> b = lambda;
  std::vector<uint8_t> t(nroots + 1, 0);
  int length = s_count;
  for (int r = s_count + 1; r <= nroots; ++r) {
    uint8_t discrepancy = 0;
    for (int i = 0; i < r; ++i) discrepancy ^= gf_.mul(lambda[i], s[r - 1 - i]);
    if (discrepancy == 0) {
      std::rotate(b.rbegin(), b.rbegin() + 1, b.rend());  // b = x * b
      b[0] = 0;
      continue;
    }
    for (int i = 0; i <= nroots; ++i) t[i] = lambda[i] ^ (i > 0 ? gf_.mul(discrepancy, b[i - 1]) : 0);
    if (2 * length <= r + s_count - 1) {
      length = r + s_count - length;
      const uint8_t inv = gf_.inv(discrepancy);
      for (int i = 0; i <= nroots; ++i) b[i] = gf_.mul(lambda[i], inv);
    } else {
      std::rotate(b.rbegin(), b.rbegin() + 1, b.rend());
      b[0] = 0;
    }
    lambda = t;
  }
  int degree = 0;
  for (int i = nroots; i > 0; --i) {
    if (lambda[i]) {
      degree = i;
      break;
    }
  }
  if (degree == 0) return result;

  // Chien search over the n valid positions only (the virtual zeros cannot be in error).
  std::vector<int> roots;
  for (int p = 0; p < n && static_cast<int>(roots.size()) <= degree; ++p) {
    const uint8_t x_inv = gf_.pow_alpha(-prim * (n - 1 - p));
    uint8_t acc = 0;
    for (int i = degree; i >= 0; --i) acc = gf_.mul(acc, x_inv) ^ lambda[i];
    if (acc == 0) roots.push_back(p);
  }
  if (static_cast<int>(roots.size()) != degree) return result;

  // Omega(x) = S(x) Lambda(x) mod x^nroots; Forney: Y = X^(1-fcr) Omega(X^-1) / Lambda'(X^-1).
  std::vector<uint8_t> omega(nroots, 0);
  for (int i = 0; i < nroots; ++i) {
    uint8_t acc = 0;
    for (int j = 0; j <= std::min(i, degree); ++j) acc ^= gf_.mul(lambda[j], s[i - j]);
    omega[i] = acc;
  }
  std::vector<uint8_t> values(roots.size(), 0);
  for (size_t r = 0; r < roots.size(); ++r) {
    const int deg = n - 1 - roots[r];
    const uint8_t x_inv = gf_.pow_alpha(-prim * deg);
    uint8_t num = 0;
    for (int i = nroots - 1; i >= 0; --i) num = gf_.mul(num, x_inv) ^ omega[i];
    num = gf_.mul(num, gf_.pow_alpha(prim * deg * (1 - config_.first_root)));
    uint8_t den = 0;  // Lambda'(x) keeps the odd terms: sum_{i odd} lambda_i x^(i-1)
    for (int i = 1; i <= degree; i += 2) den ^= gf_.mul(lambda[i], gf_.pow_alpha(-prim * deg * (i - 1)));
    if (den == 0) return result;  // word still untouched
    values[r] = gf_.div(num, den);
  }
  std::vector<uint8_t> original(word.begin(), word.end());
  int changed = 0;
  for (size_t r = 0; r < roots.size(); ++r) {
    if (values[r]) ++changed;
    word[roots[r]] ^= values[r];
  }
  if (!is_codeword(word)) {
    std::copy(original.begin(), original.end(), word.begin());
    return result;
  }
  result.ok = true;
  result.corrected = changed;
  result.located = degree;
  result.positions = roots;
  return result;
}

std::string ReedSolomon::describe() const {
  return "RS(" + std::to_string(n()) + "," + std::to_string(k()) + ") over " + gf_.describe() +
         ", fcr " + std::to_string(config_.first_root) + ", prim " +
         std::to_string(config_.primitive_element);
}

}  // namespace salvor::format
