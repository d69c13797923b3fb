// CRC tests. Check values: G. Cook, "Catalogue of parametrised CRC algorithms"
// (reveng.sourceforge.io/crc-catalogue), check = CRC of ASCII "123456789".
// Random messages: Debian's python3-crcmod as the oracle.

#include <gtest/gtest.h>

#include <random>
#include <sstream>

#include "common/error.hpp"
#include "format/crc.hpp"
#include "oracle.hpp"

using namespace salvor::format;

namespace {
const std::vector<uint8_t> kCheck = {'1', '2', '3', '4', '5', '6', '7', '8', '9'};
}

TEST(Crc, CatalogueCheckValues) {
  // Source: CRC catalogue (Greg Cook), entries as named.
  EXPECT_EQ(Crc(crc16_ibm3740()).compute(kCheck), 0x29B1u);   // CRC-16/IBM-3740
  EXPECT_EQ(Crc(crc32_iso_hdlc()).compute(kCheck), 0xCBF43926u);  // CRC-32/ISO-HDLC
  EXPECT_EQ(Crc({"CRC-16/XMODEM", 16, 0x1021, 0, false, false, 0}).compute(kCheck), 0x31C3u);
  EXPECT_EQ(Crc({"CRC-16/KERMIT", 16, 0x1021, 0, true, true, 0}).compute(kCheck), 0x2189u);
  EXPECT_EQ(Crc({"CRC-16/IBM-SDLC", 16, 0x1021, 0xFFFF, true, true, 0xFFFF}).compute(kCheck), 0x906Eu);
  EXPECT_EQ(Crc({"CRC-16/ARC", 16, 0x8005, 0, true, true, 0}).compute(kCheck), 0xBB3Du);
  EXPECT_EQ(Crc({"CRC-32/ISCSI", 32, 0x1EDC6F41, 0xFFFFFFFF, true, true, 0xFFFFFFFF}).compute(kCheck), 0xE3069283u);
  EXPECT_EQ(Crc({"CRC-32/BZIP2", 32, 0x04C11DB7, 0xFFFFFFFF, false, false, 0xFFFFFFFF}).compute(kCheck), 0xFC891918u);
  EXPECT_EQ(Crc({"CRC-32/MPEG-2", 32, 0x04C11DB7, 0xFFFFFFFF, false, false, 0}).compute(kCheck), 0x0376E6E7u);
  EXPECT_EQ(Crc({"CRC-8/SMBUS", 8, 0x07, 0, false, false, 0}).compute(kCheck), 0xF4u);
  EXPECT_EQ(Crc({"CRC-24/OPENPGP", 24, 0x864CFB, 0xB704CE, false, false, 0}).compute(kCheck), 0x21CF02u);
}

TEST(Crc, Crc32MoreVectors) {
  // CRC-32 of the empty message is 0 (init and xorout cancel) and of "The quick brown fox
  // jumps over the lazy dog" 0x414FA339 (a widely quoted value, from memory; the same
  // message goes through the python3-crcmod oracle below).
  const Crc crc(crc32_iso_hdlc());
  EXPECT_EQ(crc.compute({}), 0u);
  const std::string fox = "The quick brown fox jumps over the lazy dog";
  EXPECT_EQ(crc.compute(std::span<const uint8_t>(reinterpret_cast<const uint8_t*>(fox.data()), fox.size())),
            0x414FA339u);
  // Residue: message + CRC (little-endian) gives the constant 0x2144DF1C before xorout
  // the catalogue's residue 0xDEBB20E3 (CRC catalogue, CRC-32/ISO-HDLC "residue").
  std::vector<uint8_t> m = kCheck;
  for (int i = 0; i < 4; ++i) m.push_back(static_cast<uint8_t>(0xCBF43926u >> (8 * i)));
  EXPECT_EQ(crc.compute(m), 0x2144DF1Cu);
  EXPECT_EQ(crc.compute(m) ^ 0xFFFFFFFFu, 0xDEBB20E3u);
}

TEST(Crc, IncrementalEqualsWhole) {
  std::mt19937 rng(7);
  std::vector<uint8_t> msg(1000);
  for (auto& b : msg) b = static_cast<uint8_t>(rng());
  for (const CrcParams& p : {crc16_ibm3740(), crc32_iso_hdlc()}) {
    const Crc crc(p);
    for (size_t chunk : {size_t{1}, size_t{7}, size_t{333}, msg.size()}) {
      uint32_t reg = crc.start();
      for (size_t i = 0; i < msg.size(); i += chunk) {
        reg = crc.update(reg, std::span<const uint8_t>(msg).subspan(i, std::min(chunk, msg.size() - i)));
      }
      EXPECT_EQ(crc.finish(reg), crc.compute(msg)) << p.name << " chunk " << chunk;
    }
  }
}

TEST(Crc, RefusesBadParameters) {
  EXPECT_THROW(Crc({"w7", 7, 0x09, 0, false, false, 0}), salvor::Error);
  EXPECT_THROW(Crc({"w33", 33, 0x09, 0, false, false, 0}), salvor::Error);
  EXPECT_THROW(Crc({"big", 16, 0x11021, 0, false, false, 0}), salvor::Error);
  EXPECT_THROW(Crc({"even", 16, 0x1020, 0, false, false, 0}), salvor::Error);
}

TEST(Crc, AgreesWithCrcmodOnRandomMessages) {
  // Oracle: Debian python3-crcmod. crcmod's mkCrcFun(poly, initCrc, rev, xorOut) takes
  // initCrc = init XOR xorout (its docstring says so), so CRC-32 is
  // mkCrcFun(0x104C11DB7, 0, True, 0xFFFFFFFF) and CRC-16/IBM-3740 mkCrcFun(0x11021, 0xFFFF, False, 0).
  // A reflected-only CRC-24 and a normal CRC-8 exercise the other widths.
  struct Case {
    CrcParams params;
    const char* crcmod_args;
  };
  const std::vector<Case> cases = {
      {crc32_iso_hdlc(), "0x104C11DB7, 0x0, True, 0xFFFFFFFF"},
      {crc16_ibm3740(), "0x11021, 0xFFFF, False, 0x0"},
      {{"CRC-32/ISCSI", 32, 0x1EDC6F41, 0xFFFFFFFF, true, true, 0xFFFFFFFF}, "0x11EDC6F41, 0x0, True, 0xFFFFFFFF"},
      {{"CRC-24/OPENPGP", 24, 0x864CFB, 0xB704CE, false, false, 0}, "0x1864CFB, 0xB704CE, False, 0x0"},
      {{"CRC-8/SMBUS", 8, 0x07, 0, false, false, 0}, "0x107, 0x0, False, 0x0"},
  };
  std::mt19937 rng(2024);
  std::ostringstream input;
  std::vector<std::vector<uint8_t>> messages;
  const std::string fox = "The quick brown fox jumps over the lazy dog";
  messages.emplace_back(fox.begin(), fox.end());
  messages.emplace_back(512, 0);  // 512 zero bytes: SPEC.md's crc32_512_zero_bytes
  for (const auto& msg : messages) {
    for (uint8_t b : msg) input << std::hex << (b >> 4) << (b & 15);
    input << "-\n";
  }
  for (int m = 0; m < 40; ++m) {
    std::vector<uint8_t> msg(rng() % 300);
    for (auto& b : msg) b = static_cast<uint8_t>(rng());
    for (uint8_t b : msg) input << std::hex << (b >> 4) << (b & 15);
    input << "-\n";  // '-' keeps empty messages on their own line
    messages.push_back(msg);
  }
  std::string script = "import sys, crcmod\nfuns = [";
  for (const Case& c : cases) script += "crcmod.mkCrcFun(" + std::string(c.crcmod_args) + "),";
  script += "]\nfor line in sys.stdin:\n    data = bytes.fromhex(line.strip().rstrip('-'))\n"
            "    print(' '.join('%x' % f(data) for f in funs))\n";
  int status = 0;
  const std::string out = salvor_test::run_oracle(script, input.str(), &status);
  ASSERT_EQ(status, 0) << "oracle failed: " << out;
  std::istringstream lines(out);
  for (const auto& msg : messages) {
    for (const Case& c : cases) {
      std::string word;
      ASSERT_TRUE(lines >> word) << "oracle output ended early";
      EXPECT_EQ(Crc(c.params).compute(msg), std::stoul(word, nullptr, 16)) << c.params.name << ", " << msg.size() << " bytes";
    }
  }
}

TEST(Crc, TablePathsEqualBitwiseDefinition) {
  // The Rocksoft model computed one bit at a time (Williams 1993, section 9: the "simple"
  // shift register, augmented form avoided by feeding message bits at the top), against
  // Crc's eight-bytes-per-step tables and its zlib path, for every length 0..80 and every
  // start offset 0..7 (the eight-byte loop, the tail, unaligned starts).
  auto bitwise = [](const CrcParams& p, const uint8_t* m, size_t n) {
    const uint32_t top = 1u << (p.width - 1);
    const uint32_t mask = p.width == 32 ? 0xFFFFFFFFu : (1u << p.width) - 1;
    auto reflect = [](uint32_t v, int bits) {
      uint32_t r = 0;
      for (int i = 0; i < bits; ++i)
        if (v & (1u << i)) r |= 1u << (bits - 1 - i);
      return r;
    };
    uint32_t reg = p.init;
    for (size_t i = 0; i < n; ++i) {
      const uint32_t byte = p.refin ? reflect(m[i], 8) : m[i];
      for (int b = 7; b >= 0; --b) {
        const bool bit = ((byte >> b) & 1u) != 0;
        const bool msb = (reg & top) != 0;
        reg = (reg << 1) & mask;
        if (bit != msb) reg ^= p.poly;
      }
    }
    if (p.refout) reg = reflect(reg, p.width);
    return (reg ^ p.xorout) & mask;
  };
  const std::vector<CrcParams> params = {
      crc32_iso_hdlc(),  // zlib path
      crc16_ibm3740(),
      {"CRC-32/ISCSI", 32, 0x1EDC6F41, 0xFFFFFFFF, true, true, 0xFFFFFFFF},
      {"CRC-32/BZIP2", 32, 0x04C11DB7, 0xFFFFFFFF, false, false, 0xFFFFFFFF},
      {"CRC-16/KERMIT", 16, 0x1021, 0, true, true, 0},
      {"CRC-24/OPENPGP", 24, 0x864CFB, 0xB704CE, false, false, 0},
      {"CRC-8/SMBUS", 8, 0x07, 0, false, false, 0},
      {"CRC-32/JAMCRC", 32, 0x04C11DB7, 0xFFFFFFFF, true, true, 0},  // zlib path, other xorout
  };
  std::mt19937 rng(99);
  std::vector<uint8_t> buf(96);
  for (auto& b : buf) b = static_cast<uint8_t>(rng());
  for (const CrcParams& p : params) {
    const Crc crc(p);
    for (size_t offset = 0; offset < 8; ++offset) {
      for (size_t n = 0; n <= 80; ++n) {
        ASSERT_EQ(crc.compute(std::span<const uint8_t>(buf.data() + offset, n)), bitwise(p, buf.data() + offset, n))
            << p.name << " offset " << offset << " length " << n;
      }
    }
  }
  // An empty chunk in the middle of an incremental run changes nothing (zlib treats a null
  // buffer specially, so this guards the zlib path).
  for (const CrcParams& p : params) {
    const Crc crc(p);
    uint32_t reg = crc.update(crc.start(), std::span<const uint8_t>(buf.data(), 5));
    reg = crc.update(reg, std::span<const uint8_t>());
    reg = crc.update(reg, std::span<const uint8_t>(buf.data() + 5, 20));
    EXPECT_EQ(crc.finish(reg), crc.compute(std::span<const uint8_t>(buf.data(), 25))) << p.name;
  }
  // JAMCRC check value: CRC catalogue (Greg Cook), CRC-32/JAMCRC check = 0x340BC6D9.
  EXPECT_EQ(Crc(params.back()).compute(kCheck), 0x340BC6D9u);
}
