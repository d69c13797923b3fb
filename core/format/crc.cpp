// Table-driven Rocksoft-model CRC (Williams 1993). A reflected CRC runs a reflected
// register (shift right, reflected polynomial); a normal one shifts left with the
// register aligned to the top of 32 bits so that every width 8..32 shares one loop.

#include "format/crc.hpp"

#include <cstdio>

#include <zlib.h>

#include "common/error.hpp"

namespace salvor::format {

namespace {

uint32_t reflect(uint32_t v, int width) {
  uint32_t r = 0;
  for (int i = 0; i < width; ++i) {
    if (v & (1u << i)) r |= 1u << (width - 1 - i);
  }
  return r;
}

std::string hex(uint32_t v) {
  char buf[16];
  std::snprintf(buf, sizeof buf, "0x%X", v);
  return buf;
}

}  // namespace

CrcParams crc16_ibm3740() {
  return CrcParams{"CRC-16/IBM-3740", 16, 0x1021, 0xFFFF, false, false, 0x0000};
}

CrcParams crc32_iso_hdlc() {
  return CrcParams{"CRC-32/ISO-HDLC", 32, 0x04C11DB7, 0xFFFFFFFF, true, true, 0xFFFFFFFF};
}

Crc::Crc(const CrcParams& params) : params_(params) {
  const std::string where = params.name.empty() ? std::string("crc") : params.name;
  if (params.width < 8 || params.width > 32) {
    throw_usage(where, "width " + std::to_string(params.width) + " is outside 8..32");
  }
  mask_ = params.width == 32 ? 0xFFFFFFFFu : ((1u << params.width) - 1);
  if ((params.poly & ~mask_) || (params.init & ~mask_) || (params.xorout & ~mask_)) {
    throw_usage(where, "poly, init or xorout has bits above the width " +
                           std::to_string(params.width));
  }
  if ((params.poly & 1u) == 0) {
    // A CRC generator without the x^0 term is degenerate (a shifted CRC of lower width).
    throw_usage(where, "poly " + hex(params.poly) + " lacks the x^0 term");
  }
  use_zlib_ = params.width == 32 && params.poly == 0x04C11DB7u && params.refin;
  if (params.refin) {
    const uint32_t rpoly = reflect(params.poly, params.width);
    for (uint32_t b = 0; b < 256; ++b) {
      uint32_t r = b;
      for (int k = 0; k < 8; ++k) r = (r & 1u) ? (r >> 1) ^ rpoly : r >> 1;
      tables_[0][b] = r;
    }
    for (int k = 1; k < 8; ++k)
      for (uint32_t b = 0; b < 256; ++b) {
        const uint32_t prev = tables_[k - 1][b];
        tables_[k][b] = (prev >> 8) ^ tables_[0][prev & 0xFFu];
      }
  } else {
    const uint32_t top_poly = params.poly << (32 - params.width);
    for (uint32_t b = 0; b < 256; ++b) {
      uint32_t r = b << 24;
      for (int k = 0; k < 8; ++k) r = (r & 0x80000000u) ? (r << 1) ^ top_poly : r << 1;
      tables_[0][b] = r;
    }
    for (int k = 1; k < 8; ++k)
      for (uint32_t b = 0; b < 256; ++b) {
        const uint32_t prev = tables_[k - 1][b];
        tables_[k][b] = (prev << 8) ^ tables_[0][prev >> 24];
      }
  }
}

uint32_t Crc::start() const {
  // The register is kept reflected (refin) or top-aligned (normal) between calls.
  if (params_.refin) return reflect(params_.init, params_.width);
  return params_.init << (32 - params_.width);
}

uint32_t Crc::update(uint32_t reg, std::span<const uint8_t> bytes) const {
  const uint8_t* p = bytes.data();
  size_t n = bytes.size();
  const auto& t = tables_;
  if (use_zlib_) {
    // zlib keeps the same reflected register but complements it on entry and exit. It
    // answers its initial value for a null buffer, so an empty chunk must not reach it.
    if (n == 0) return reg;
    return ~static_cast<uint32_t>(crc32_z(~reg & 0xFFFFFFFFu, p, n));
  }
  if (params_.refin) {
    // Reflected register: the first message byte meets the low byte of the register.
    for (; n >= 8; n -= 8, p += 8) {
      const uint32_t a = (p[0] | p[1] << 8 | p[2] << 16 | static_cast<uint32_t>(p[3]) << 24) ^ reg;
      const uint32_t b = p[4] | p[5] << 8 | p[6] << 16 | static_cast<uint32_t>(p[7]) << 24;
      reg = t[7][a & 0xFFu] ^ t[6][(a >> 8) & 0xFFu] ^ t[5][(a >> 16) & 0xFFu] ^ t[4][a >> 24] ^
            t[3][b & 0xFFu] ^ t[2][(b >> 8) & 0xFFu] ^ t[1][(b >> 16) & 0xFFu] ^ t[0][b >> 24];
    }
    for (; n > 0; --n) reg = (reg >> 8) ^ t[0][(reg ^ *p++) & 0xFFu];
  } else {
    // Top-aligned register: the first message byte meets the high byte of the register.
    for (; n >= 8; n -= 8, p += 8) {
      const uint32_t a = (static_cast<uint32_t>(p[0]) << 24 | p[1] << 16 | p[2] << 8 | p[3]) ^ reg;
      const uint32_t b = static_cast<uint32_t>(p[4]) << 24 | p[5] << 16 | p[6] << 8 | p[7];
      reg = t[7][a >> 24] ^ t[6][(a >> 16) & 0xFFu] ^ t[5][(a >> 8) & 0xFFu] ^ t[4][a & 0xFFu] ^
            t[3][b >> 24] ^ t[2][(b >> 16) & 0xFFu] ^ t[1][(b >> 8) & 0xFFu] ^ t[0][b & 0xFFu];
    }
    for (; n > 0; --n) reg = (reg << 8) ^ t[0][((reg >> 24) ^ *p++) & 0xFFu];
  }
  return reg;
}

uint32_t Crc::finish(uint32_t reg) const {
  uint32_t value = params_.refin ? reg : reg >> (32 - params_.width);
  // The register is reflected exactly when refin is set; the output wants refout.
  if (params_.refin != params_.refout) value = reflect(value, params_.width);
  return (value ^ params_.xorout) & mask_;
}

uint32_t Crc::compute(std::span<const uint8_t> bytes) const { return finish(update(start(), bytes)); }

std::string Crc::describe() const {
  return params_.name + " (width " + std::to_string(params_.width) + ", poly " + hex(params_.poly) +
         ", init " + hex(params_.init) + ", refin " + (params_.refin ? "true" : "false") +
         ", refout " + (params_.refout ? "true" : "false") + ", xorout " + hex(params_.xorout) + ")";
}

uint32_t crc_check_value(const CrcParams& params) {
  static constexpr uint8_t kCheckMessage[] = {'1', '2', '3', '4', '5', '6', '7', '8', '9'};
  return Crc(params).compute(kCheckMessage);
}

}  // namespace salvor::format
