// GF(2^8) tables (see galois_field.hpp).

#include "format/galois_field.hpp"

#include <cstdio>

#include "common/error.hpp"

namespace salvor::format {

int multiplicative_order_of_x(unsigned poly) {
  if (poly < 0x100 || poly > 0x1FF) return 0;
  unsigned v = 1;
  for (int n = 1; n <= 255; ++n) {
    v <<= 1;
    if (v & 0x100) v ^= poly;
    if (v == 1) return n;
  }
  return 0;
}

GaloisField256::GaloisField256(unsigned poly) : poly_(poly) {
  const int order = multiplicative_order_of_x(poly);
  if (order != 255) {
    char buf[128];
    std::snprintf(buf, sizeof buf,
                  "polynomial 0x%X is not primitive over GF(2^8) (order of x is %d, need 255)",
                  poly, order);
    throw_usage("field_polynomial", buf);
  }
  unsigned v = 1;
  for (int i = 0; i < 255; ++i) {
    exp_[i] = static_cast<uint8_t>(v);
    exp_[i + 255] = static_cast<uint8_t>(v);
    log_[v] = i;
    v <<= 1;
    if (v & 0x100) v ^= poly;
  }
  exp_[510] = exp_[0];
  exp_[511] = exp_[1];
  log_[0] = -1;
}

uint8_t GaloisField256::div(uint8_t a, uint8_t b) const {
  if (b == 0) throw_internal("GF(2^8) division by zero");
  if (a == 0) return 0;
  return exp_[log_[a] + 255 - log_[b]];
}

uint8_t GaloisField256::inv(uint8_t a) const {
  if (a == 0) throw_internal("GF(2^8) inverse of zero");
  return exp_[255 - log_[a]];
}

std::string GaloisField256::describe() const {
  char buf[48];
  std::snprintf(buf, sizeof buf, "GF(2^8) modulo 0x%X", poly_);
  return buf;
}

}  // namespace salvor::format
