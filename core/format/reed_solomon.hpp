#pragma once
// Systematic Reed–Solomon code over GF(2^8) with an errors-and-erasures decoder.
//   I. S. Reed & G. Solomon, "Polynomial codes over certain finite fields", J. SIAM 8(2), 1960.
//   E. R. Berlekamp, "Algebraic Coding Theory", 1968; J. L. Massey, "Shift-register synthesis
//   and BCH decoding", IEEE Trans. IT-15(1), 1969 (the locator, here started from the
//   erasure locator); R. T. Chien, IEEE Trans. IT-10(4), 1964 (root search);
//   G. D. Forney, "On decoding BCH codes", IEEE Trans. IT-11(4), 1965 (error values).
// Parameterisation as in libfec's init_rs_char(8, poly, fcr, prim, nroots, pad) (man rs(3)):
// generator roots alpha^(prim*(fcr+i)), i = 0..nroots-1; a codeword is data[0..k-1] then
// parity[0..nroots-1], symbol 0 the highest-degree coefficient; a shortened code (n < 255)
// has 255-n virtual leading zeros. Bad data never throws: decode() reports failure.
// Speed: decode() allocates nothing on the heap apart from RsDecodeResult::positions when
// errata are located (scratch lives on the stack, so one object may be shared by threads);
// syndromes use one multiply-by-constant table per root and the encoder one row of
// generator products per feedback value (each parity_symbols x 256 bytes).

#include <cstdint>
#include <span>
#include <string>
#include <vector>

#include "format/galois_field.hpp"

namespace salvor::format {

struct ReedSolomonConfig {
  unsigned field_polynomial = 0x11D;  // primitive, degree 8
  int first_root = 0;                 // fcr, 0..254
  int primitive_element = 1;          // prim, 1..254, coprime to 255
  int parity_symbols = 16;            // nroots = n - k, 1..254
  int length = 255;                   // n: symbols per (shortened) codeword, nroots < n <= 255
};

struct RsDecodeResult {
  bool ok = false;         // the word is a codeword now (checked by recomputing syndromes)
  int corrected = 0;       // symbols whose value was changed (libfec's return count: an
                           // erasure counts only when that symbol really was wrong)
  int located = 0;         // roots of the errata locator: errors plus all erasures used
  int erasures = 0;        // distinct erasure positions used
  std::vector<int> positions;  // located positions (0 = first transmitted symbol), ascending
};

class ReedSolomon {
 public:
  explicit ReedSolomon(const ReedSolomonConfig& config);  // throws salvor::Error(usage)

  int n() const { return config_.length; }
  int k() const { return config_.length - config_.parity_symbols; }
  int parity_symbols() const { return config_.parity_symbols; }

  // data: k symbols; parity: parity_symbols symbols (written).
  void encode(std::span<const uint8_t> data, std::span<uint8_t> parity) const;
  // data (k symbols) -> codeword (n symbols).
  std::vector<uint8_t> encode(std::span<const uint8_t> data) const;

  // Corrects `word` (n symbols) in place given erasure positions (0-based, any order;
  // duplicates are merged). On failure the word is left unchanged and ok is false.
  // Succeeds whenever 2*errors + erasures <= parity_symbols.
  RsDecodeResult decode(std::span<uint8_t> word, std::span<const int> erasure_positions = {}) const;

  bool is_codeword(std::span<const uint8_t> word) const;
  // Generator polynomial, highest degree first (monic: g[0] == 1).
  const std::vector<uint8_t>& generator() const { return generator_; }
  const GaloisField256& field() const { return gf_; }
  std::string describe() const;

 private:
  // S_i = r(alpha^(prim*(fcr+i))) into s[0..parity_symbols-1]; returns true when all are zero.
  bool syndromes(std::span<const uint8_t> word, uint8_t* s) const;

  ReedSolomonConfig config_;
  GaloisField256 gf_;
  std::vector<uint8_t> generator_;
  // root_product_[i * 256 + v] = v * alpha^(prim*(fcr+i)): Horner steps without log lookups.
  std::vector<uint8_t> root_product_;
  // generator_product_[f * parity_symbols + i] = f * g[i+1]: one row per encoder feedback value.
  std::vector<uint8_t> generator_product_;
};

}  // namespace salvor::format
