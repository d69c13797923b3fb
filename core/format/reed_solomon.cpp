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
  generator_product_.resize(static_cast<size_t>(config.parity_symbols) * 256);
  for (int f = 0; f < 256; ++f)
    for (int i = 0; i < config.parity_symbols; ++i)
      generator_product_[static_cast<size_t>(f) * config.parity_symbols + i] =
          gf_.mul(static_cast<uint8_t>(f), generator_[i + 1]);
  root_product_.resize(static_cast<size_t>(config.parity_symbols) * 256);
  for (int i = 0; i < config.parity_symbols; ++i) {
    const uint8_t root = gf_.pow_alpha(config.primitive_element * (config.first_root + i));
    for (int v = 0; v < 256; ++v) root_product_[static_cast<size_t>(i) * 256 + v] = gf_.mul(static_cast<uint8_t>(v), root);
  }
}

void ReedSolomon::encode(std::span<const uint8_t> data, std::span<uint8_t> parity) const {
  const int nroots = config_.parity_symbols;
  if (static_cast<int>(data.size()) != k() || static_cast<int>(parity.size()) != nroots) {
    throw_internal("reed-solomon encode: wrong buffer sizes");
  }
  // Long division of data(x) * x^nroots by g(x): a shift register holding the remainder.
  std::fill(parity.begin(), parity.end(), 0);
  const uint8_t* products = generator_product_.data();
  for (uint8_t d : data) {
    const uint8_t* row = products + static_cast<size_t>(d ^ parity[0]) * nroots;  // feedback * g[1..nroots]
    for (int i = 0; i + 1 < nroots; ++i) parity[i] = parity[i + 1] ^ row[i];
    parity[nroots - 1] = row[nroots - 1];
  }
}

std::vector<uint8_t> ReedSolomon::encode(std::span<const uint8_t> data) const {
  std::vector<uint8_t> word(data.begin(), data.end());
  word.resize(config_.length);
  encode(data, std::span<uint8_t>(word).subspan(k()));
  return word;
}

namespace {

// Horner for `Block` syndromes at once, kept in registers: one table lookup and one XOR per
// symbol and syndrome, `Block` independent chains to hide the load latency.
template <int Block>
void syndrome_block(const uint8_t* word, size_t n, const uint8_t* tables, uint8_t* out) {
  uint8_t acc[Block] = {};
  for (size_t j = 0; j < n; ++j) {
    const uint8_t r = word[j];
    for (int i = 0; i < Block; ++i) acc[i] = tables[i * 256 + acc[i]] ^ r;
  }
  for (int i = 0; i < Block; ++i) out[i] = acc[i];
}

int mod255(int e) {
  const int m = e % 255;
  return m < 0 ? m + 255 : m;
}

}  // namespace

bool ReedSolomon::syndromes(std::span<const uint8_t> word, uint8_t* s) const {
  const int nroots = config_.parity_symbols;
  const uint8_t* tables = root_product_.data();
  int i = 0;
  for (; i + 8 <= nroots; i += 8) syndrome_block<8>(word.data(), word.size(), tables + i * 256, s + i);
  for (; i + 2 <= nroots; i += 2) syndrome_block<2>(word.data(), word.size(), tables + i * 256, s + i);
  if (i < nroots) syndrome_block<1>(word.data(), word.size(), tables + i * 256, s + i);
  uint8_t any = 0;
  for (int k = 0; k < nroots; ++k) any |= s[k];
  return any == 0;
}

bool ReedSolomon::is_codeword(std::span<const uint8_t> word) const {
  if (static_cast<int>(word.size()) != config_.length) return false;
  uint8_t s[256];
  return syndromes(word, s);
}

RsDecodeResult ReedSolomon::decode(std::span<uint8_t> word, std::span<const int> erasure_positions) const {
  // All scratch is on the stack, sized for the largest code (n <= 255, nroots <= 254).
  RsDecodeResult result;
  const int n = config_.length;
  const int nroots = config_.parity_symbols;
  const int prim = config_.primitive_element;
  const int fcr = config_.first_root;
  if (static_cast<int>(word.size()) != n) return result;
  const GaloisField256& gf = gf_;
  // a * alpha^log_c for a log already reduced to 0..254.
  auto mul_log = [&gf](uint8_t a, int log_c) -> uint8_t { return a ? gf.exp_at(gf.log(a) + log_c) : 0; };

  // Distinct erasures in ascending order (a presence set merges duplicates without sorting).
  bool erased[256] = {};
  for (int p : erasure_positions) {
    if (p < 0 || p >= n) return result;  // not a position of this code
    erased[p] = true;
  }
  int erasures[256];
  int s_count = 0;
  for (int p = 0; p < n; ++p)
    if (erased[p]) erasures[s_count++] = p;
  result.erasures = s_count;
  if (s_count > nroots) return result;

  uint8_t s[256];
  if (syndromes(word, s)) {
    result.ok = true;  // already a codeword: nothing to locate
    return result;
  }

  // Erasure locator Gamma(x) = prod (1 - X_j x); the polynomials below are lowest degree first.
  uint8_t lambda[256] = {};
  lambda[0] = 1;
  for (int e = 0; e < s_count; ++e) {
    const int log_x = mod255(prim * (n - 1 - erasures[e]));
    for (int d = e + 1; d >= 1; --d) lambda[d] ^= mul_log(lambda[d - 1], log_x);
  }

  // Berlekamp–Massey started after the erasures (equivalent to BM on the Forney syndromes).
  // Before step r both Lambda and B have degree < r, so the loops stop at r.
  uint8_t b[256] = {};
  std::copy(lambda, lambda + s_count + 1, b);
  uint8_t t[256];
  int length = s_count;
  for (int r = s_count + 1; r <= nroots; ++r) {
    uint8_t discrepancy = 0;
    for (int i = 0; i < r; ++i) discrepancy ^= gf.mul(lambda[i], s[r - 1 - i]);
    if (discrepancy == 0) {
      for (int i = r; i >= 1; --i) b[i] = b[i - 1];  // b = x * b
      b[0] = 0;
      continue;
    }
    const int log_disc = gf.log(discrepancy);
    t[0] = lambda[0];
    for (int i = 1; i <= r; ++i) t[i] = lambda[i] ^ mul_log(b[i - 1], log_disc);
    if (2 * length <= r + s_count - 1) {
      length = r + s_count - length;
      const int log_inv = 255 - log_disc;
      for (int i = 0; i <= r; ++i) b[i] = mul_log(lambda[i], log_inv);
    } else {
      for (int i = r; i >= 1; --i) b[i] = b[i - 1];
      b[0] = 0;
    }
    std::copy(t, t + r + 1, lambda);
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
  // Term k of Lambda(X_p^-1) is lambda_k beta^(-k(n-1-p)): its log grows by k*prim per
  // position, so each term is one add and one table lookup.
  int term_log[256], term_step[256];
  int terms = 0;
  for (int k = 1; k <= degree; ++k) {
    if (!lambda[k]) continue;
    term_log[terms] = mod255(gf.log(lambda[k]) - k * prim * (n - 1));
    term_step[terms] = mod255(k * prim);
    ++terms;
  }
  int roots[256];
  int found = 0;
  for (int p = 0; p < n; ++p) {
    uint8_t q = lambda[0];
    for (int m = 0; m < terms; ++m) {
      q ^= gf.exp_at(term_log[m]);
      const int next = term_log[m] + term_step[m];
      term_log[m] = next >= 255 ? next - 255 : next;
    }
    if (q == 0) {
      roots[found++] = p;
      if (found == degree) break;  // a polynomial of degree d has at most d roots
    }
  }
  if (found != degree) return result;

  // Omega(x) = S(x) Lambda(x) mod x^nroots; Forney: Y = X^(1-fcr) Omega(X^-1) / Lambda'(X^-1).
  uint8_t omega[256];
  for (int i = 0; i < nroots; ++i) {
    uint8_t acc = 0;
    for (int j = 0; j <= std::min(i, degree); ++j) acc ^= gf.mul(lambda[j], s[i - j]);
    omega[i] = acc;
  }
  int omega_top = nroots - 1;
  while (omega_top > 0 && omega[omega_top] == 0) --omega_top;
  uint8_t values[256];
  for (int r = 0; r < found; ++r) {
    const int deg = n - 1 - roots[r];
    const int log_x_inv = mod255(-prim * deg);
    uint8_t num = 0;
    for (int i = omega_top; i >= 0; --i) num = mul_log(num, log_x_inv) ^ omega[i];
    num = mul_log(num, mod255(mod255(prim * deg) * mod255(1 - fcr)));
    uint8_t den = 0;  // Lambda'(x) keeps the odd terms: sum_{i odd} lambda_i x^(i-1)
    const int log_x_inv2 = mod255(2 * log_x_inv);
    int log_power = 0;  // log of x_inv^(i-1)
    for (int i = 1; i <= degree; i += 2) {
      den ^= mul_log(lambda[i], log_power);
      log_power += log_x_inv2;
      if (log_power >= 255) log_power -= 255;
    }
    if (den == 0) return result;  // word still untouched
    values[r] = gf.div(num, den);
  }

  // The corrected word is a codeword exactly when its syndromes vanish; they are linear, so
  // S'_i = S_i + sum_r Y_r X_r^(fcr+i) checks the result without touching or rescanning the word.
  uint8_t check[256];
  std::copy(s, s + nroots, check);
  int changed = 0;
  for (int r = 0; r < found; ++r) {
    if (!values[r]) continue;
    ++changed;
    const int log_x = mod255(prim * (n - 1 - roots[r]));
    int e = mod255(gf.log(values[r]) + fcr * log_x);
    for (int i = 0; i < nroots; ++i) {
      check[i] ^= gf.exp_at(e);
      e += log_x;
      if (e >= 255) e -= 255;
    }
  }
  uint8_t residue = 0;
  for (int i = 0; i < nroots; ++i) residue |= check[i];
  if (residue) return result;
  for (int r = 0; r < found; ++r) word[roots[r]] ^= values[r];
  result.ok = true;
  result.corrected = changed;
  result.located = degree;
  result.positions.assign(roots, roots + found);
  return result;
}

std::string ReedSolomon::describe() const {
  return "RS(" + std::to_string(n()) + "," + std::to_string(k()) + ") over " + gf_.describe() +
         ", fcr " + std::to_string(config_.first_root) + ", prim " +
         std::to_string(config_.primitive_element);
}

}  // namespace salvor::format
