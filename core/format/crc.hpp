#pragma once
// Parameterised CRC in the Rocksoft model: R. N. Williams, "A Painless Guide to CRC Error
// Detection Algorithms" (1993); parameter names and check values as in G. Cook,
// "Catalogue of parametrised CRC algorithms" (reveng.sourceforge.io/crc-catalogue).
// Table-driven, any width 8..32; eight bytes per step ("slicing-by-8": eight tables, the
// register advanced by 64 bits with one lookup per byte), one byte per step for the tail.
// The CRC-32 polynomial 0x04C11DB7 with reflected input (CRC-32/ISO-HDLC, JAMCRC...) is
// computed by zlib's crc32 instead (any init/xorout), the speed reference for CRC-32.

#include <array>
#include <cstddef>
#include <cstdint>
#include <span>
#include <string>

#include "format/track_format.hpp"

namespace salvor::format {

// The two CRCs of tf1 (catalogue parameters).
CrcParams crc16_ibm3740();  // width 16, poly 0x1021, init 0xFFFF, no reflection, xorout 0
CrcParams crc32_iso_hdlc(); // width 32, poly 0x04C11DB7, init/xorout 0xFFFFFFFF, reflected

class Crc {
 public:
  // Throws salvor::Error(usage) when the width is outside 8..32 or a value has bits
  // above the width.
  explicit Crc(const CrcParams& params);

  // The CRC of a whole message.
  uint32_t compute(std::span<const uint8_t> bytes) const;

  // Incremental form: register = start(); register = update(register, chunk)...;
  // value = finish(register). Chunks of any size give the same value as compute().
  uint32_t start() const;
  uint32_t update(uint32_t reg, std::span<const uint8_t> bytes) const;
  uint32_t finish(uint32_t reg) const;

  const CrcParams& params() const { return params_; }
  std::string describe() const;

 private:
  CrcParams params_;
  bool use_zlib_ = false;  // width 32, poly 0x04C11DB7, refin: zlib's crc32 on the register
  uint32_t mask_ = 0;
  // tables_[0] is the classic byte table; tables_[k][b] advances byte b through k more zero bytes.
  std::array<std::array<uint32_t, 256>, 8> tables_{};
};

// Check value of a CRC: the CRC of the ASCII string "123456789" (catalogue definition).
uint32_t crc_check_value(const CrcParams& params);

}  // namespace salvor::format
