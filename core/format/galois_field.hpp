#pragma once
// Arithmetic in GF(2^8) = GF(2)[x] / p(x) with log/antilog tables, alpha = x.
// The tables need x to generate the multiplicative group, i.e. p(x) primitive
// (multiplicative order of x equal to 255); R. Lidl & H. Niederreiter, "Finite Fields",
// 1997, ch. 3. An irreducible but non-primitive polynomial such as 0x11B (order 51) is
// refused.

#include <array>
#include <cstdint>
#include <string>

namespace salvor::format {

// Multiplicative order of x modulo the degree-8 polynomial `poly` (bit 8 set), or 0 when
// x never returns to 1 (reducible with a factor x). 255 means primitive.
int multiplicative_order_of_x(unsigned poly);

class GaloisField256 {
 public:
  explicit GaloisField256(unsigned poly);  // throws salvor::Error(usage) if not primitive

  uint8_t mul(uint8_t a, uint8_t b) const {
    if (a == 0 || b == 0) return 0;
    return exp_[log_[a] + log_[b]];
  }
  uint8_t div(uint8_t a, uint8_t b) const;   // b != 0 (internal error otherwise)
  uint8_t inv(uint8_t a) const;              // a != 0
  uint8_t pow_alpha(int e) const {           // alpha^e for any integer e
    int m = e % 255;
    if (m < 0) m += 255;
    return exp_[m];
  }
  int log(uint8_t a) const { return log_[a]; }  // a != 0
  uint8_t exp_at(int e) const { return exp_[e]; }  // alpha^e for 0 <= e < 510, no reduction
  unsigned polynomial() const { return poly_; }
  std::string describe() const;

 private:
  unsigned poly_;
  std::array<uint8_t, 512> exp_{};  // doubled so that log a + log b needs no reduction
  std::array<int, 256> log_{};
};

}  // namespace salvor::format
