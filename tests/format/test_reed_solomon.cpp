// Reed–Solomon tests. Published vector: ISO/IEC 18004 (QR code) worked example "01234567"
// version 1-M, RS(26,16) over GF(2^8)/0x11D, fcr 0. Oracle: Debian's
// libfec (Phil Karn), init_rs_char / encode_rs_char / decode_rs_char, same parameterisation.
// Errors-and-erasures bound 2e + s <= n - k: Lin & Costello, "Error Control Coding", 2004.

#include <gtest/gtest.h>

#include <algorithm>
#include <memory>
#include <random>

#include "common/error.hpp"
#include "format/galois_field.hpp"
#include "format/reed_solomon.hpp"

extern "C" {
#include <fec.h>
}

using namespace salvor::format;

namespace {

struct FecDeleter {
  void operator()(void* p) const { free_rs_char(p); }
};
using FecCodec = std::unique_ptr<void, FecDeleter>;

FecCodec fec_codec(const ReedSolomonConfig& c) {
  return FecCodec(init_rs_char(8, static_cast<int>(c.field_polynomial), c.first_root, c.primitive_element,
                               c.parity_symbols, 255 - c.length));
}

std::vector<uint8_t> random_bytes(std::mt19937& rng, size_t n) {
  std::vector<uint8_t> v(n);
  for (auto& b : v) b = static_cast<uint8_t>(rng());
  return v;
}

// Distinct random positions in 0..n-1.
std::vector<int> random_positions(std::mt19937& rng, int n, int count) {
  std::vector<int> all(n);
  for (int i = 0; i < n; ++i) all[i] = i;
  std::shuffle(all.begin(), all.end(), rng);
  all.resize(count);
  return all;
}

const ReedSolomonConfig kTf1_512{0x11D, 0, 1, 16, 188};
const ReedSolomonConfig kTf1_4096{0x11D, 0, 1, 10, 215};

}  // namespace

TEST(GaloisField, PrimitivityCheck) {
  // Orders of x: 0x11D and 0x187 primitive (255); 0x11B (the AES polynomial) irreducible
  // (FIPS 197) irreducible but with order 51 (value from memory, so checked two ways here:
  // the order function and x^51 = 1 by plain multiplication below).
  EXPECT_EQ(multiplicative_order_of_x(0x11D), 255);
  EXPECT_EQ(multiplicative_order_of_x(0x187), 255);
  EXPECT_EQ(multiplicative_order_of_x(0x11B), 51);
  EXPECT_THROW(GaloisField256(0x11B), salvor::Error);
  {
    unsigned v = 1;
    int first_one = 0;
    for (int n = 1; n <= 255 && !first_one; ++n) {
      v <<= 1;
      if (v & 0x100) v ^= 0x11B;
      if (v == 1) first_one = n;
    }
    EXPECT_EQ(first_one, 51);
  }
  // alpha powers for 0x11D, by hand from x^8 = x^4 + x^3 + x^2 + 1 (0x1D), doubling and
  // reducing: 01 02 04 08 10 20 40 80 1D 3A 74 E8 CD 87 13 26.
  const GaloisField256 gf(0x11D);
  const uint8_t expected[16] = {0x01, 0x02, 0x04, 0x08, 0x10, 0x20, 0x40, 0x80,
                                0x1D, 0x3A, 0x74, 0xE8, 0xCD, 0x87, 0x13, 0x26};
  for (int i = 0; i < 16; ++i) EXPECT_EQ(gf.pow_alpha(i), expected[i]) << i;
  for (int a = 1; a < 256; ++a) EXPECT_EQ(gf.mul(static_cast<uint8_t>(a), gf.inv(static_cast<uint8_t>(a))), 1);
}

TEST(ReedSolomon, QrCodeVector) {
  // ISO/IEC 18004 "01234567" 1-M: data codewords and the 10 EC codewords (the standard's
  // worked example; the vector also equals libfec's init_rs_char(8,0x11d,0,1,10,229)).
  const ReedSolomon rs({0x11D, 0, 1, 10, 26});
  const std::vector<uint8_t> data = {0x10, 0x20, 0x0C, 0x56, 0x61, 0x80, 0xEC, 0x11,
                                     0xEC, 0x11, 0xEC, 0x11, 0xEC, 0x11, 0xEC, 0x11};
  std::vector<uint8_t> parity(10);
  rs.encode(data, parity);
  EXPECT_EQ(parity, (std::vector<uint8_t>{0xA5, 0x24, 0xD4, 0xC1, 0xED, 0x36, 0xC7, 0x87, 0x2C, 0x55}));
  FecCodec fec = fec_codec({0x11D, 0, 1, 10, 26});
  std::vector<uint8_t> theirs(10);
  encode_rs_char(fec.get(), const_cast<uint8_t*>(data.data()), theirs.data());
  EXPECT_EQ(theirs, parity);
  // Generator with 7 roots (ISO/IEC 18004 Annex A): exponents 0 87 229 146 149 238 102 21.
  const ReedSolomon rs7({0x11D, 0, 1, 7, 26});
  const int exps[8] = {0, 87, 229, 146, 149, 238, 102, 21};
  for (int i = 0; i < 8; ++i) EXPECT_EQ(rs7.generator()[i], rs7.field().pow_alpha(exps[i])) << i;
}

TEST(ReedSolomon, EncoderMatchesLibfec) {
  std::mt19937 rng(11);
  // tf1's codes, plus CCSDS-like parameters (fcr 112, prim 11, poly 0x187) for the
  // prim != 1 bookkeeping.
  for (const ReedSolomonConfig& c : {kTf1_512, kTf1_4096, ReedSolomonConfig{0x187, 112, 11, 32, 255},
                                     ReedSolomonConfig{0x11D, 1, 1, 4, 19}}) {
    const ReedSolomon rs(c);
    FecCodec fec = fec_codec(c);
    ASSERT_TRUE(fec);
    for (int trial = 0; trial < 20; ++trial) {
      std::vector<uint8_t> data = random_bytes(rng, static_cast<size_t>(rs.k()));
      std::vector<uint8_t> ours(c.parity_symbols), theirs(c.parity_symbols);
      rs.encode(data, ours);
      encode_rs_char(fec.get(), data.data(), theirs.data());
      ASSERT_EQ(ours, theirs) << rs.describe();
    }
  }
}

TEST(ReedSolomon, DecodesWithinBoundAndAgreesWithLibfec) {
  // For every split 2e + s <= n - k: success, the original codeword back, and libfec's
  // decode_rs_char gives the same count and the same data.
  std::mt19937 rng(12);
  for (const ReedSolomonConfig& c : {kTf1_512, kTf1_4096, ReedSolomonConfig{0x187, 112, 11, 16, 100}}) {
    const ReedSolomon rs(c);
    FecCodec fec = fec_codec(c);
    const int r = c.parity_symbols;
    for (int s = 0; s <= r; ++s) {
      for (int e = 0; 2 * e + s <= r; ++e) {
        for (int trial = 0; trial < 3; ++trial) {
          const std::vector<uint8_t> codeword = rs.encode(random_bytes(rng, static_cast<size_t>(rs.k())));
          std::vector<uint8_t> received = codeword;
          std::vector<int> pos = random_positions(rng, rs.n(), e + s);
          // The first e positions get errors; the rest are erasures, half of them really wrong.
          for (int i = 0; i < e; ++i) received[pos[i]] ^= static_cast<uint8_t>(1 + rng() % 255);
          std::vector<int> erasures(pos.begin() + e, pos.end());
          for (size_t i = 0; i < erasures.size(); i += 2) received[erasures[i]] ^= static_cast<uint8_t>(1 + rng() % 255);

          std::vector<uint8_t> ours = received;
          const RsDecodeResult res = rs.decode(ours, erasures);
          ASSERT_TRUE(res.ok) << rs.describe() << " e=" << e << " s=" << s;
          ASSERT_EQ(ours, codeword) << "e=" << e << " s=" << s;

          std::vector<uint8_t> theirs = received;
          std::vector<int> fec_eras(erasures);
          fec_eras.resize(static_cast<size_t>(r));
          const int count = decode_rs_char(fec.get(), theirs.data(), fec_eras.data(), s);
          EXPECT_EQ(res.corrected, count) << rs.describe() << " e=" << e << " s=" << s;
          EXPECT_EQ(ours, theirs);
        }
      }
    }
  }
}

TEST(ReedSolomon, BeyondBoundNeverClaimsANonCodeword) {
  // Beyond 2e + s <= n - k the decoder may fail or land on another codeword, but a
  // success must always be a codeword (checked against libfec's encoder as well).
  std::mt19937 rng(13);
  for (const ReedSolomonConfig& c : {kTf1_512, kTf1_4096}) {
    const ReedSolomon rs(c);
    FecCodec fec = fec_codec(c);
    int failures = 0, successes = 0;
    for (int trial = 0; trial < 300; ++trial) {
      const std::vector<uint8_t> codeword = rs.encode(random_bytes(rng, static_cast<size_t>(rs.k())));
      std::vector<uint8_t> received = codeword;
      const int t = c.parity_symbols / 2;
      const int e = t + 1 + static_cast<int>(rng() % 4);
      for (int p : random_positions(rng, rs.n(), e)) received[p] ^= static_cast<uint8_t>(1 + rng() % 255);
      std::vector<uint8_t> ours = received;
      const RsDecodeResult res = rs.decode(ours, {});
      if (!res.ok) {
        ++failures;
        EXPECT_EQ(ours, received) << "a failed decode must leave the word unchanged";
        continue;
      }
      ++successes;
      std::vector<uint8_t> parity(c.parity_symbols);
      encode_rs_char(fec.get(), ours.data(), parity.data());
      EXPECT_TRUE(std::equal(parity.begin(), parity.end(), ours.begin() + rs.k())) << "claimed a non-codeword";
    }
    EXPECT_GT(failures, 0);
  }
}

TEST(ReedSolomon, BadInputIsAStatusNotAnException) {
  const ReedSolomon rs(kTf1_512);
  std::vector<uint8_t> word(188, 0);
  std::vector<int> out_of_range = {200};
  EXPECT_FALSE(rs.decode(word, out_of_range).ok);
  std::vector<int> too_many(17);
  for (int i = 0; i < 17; ++i) too_many[i] = i;
  word[3] = 1;
  EXPECT_FALSE(rs.decode(word, too_many).ok);
  std::vector<uint8_t> short_word(10, 0);
  EXPECT_FALSE(rs.decode(short_word, {}).ok);
  // Duplicated erasure positions are merged.
  std::vector<int> dup = {3, 3, 3};
  const RsDecodeResult r = rs.decode(word, dup);
  EXPECT_TRUE(r.ok);
  EXPECT_EQ(r.erasures, 1);
  EXPECT_EQ(word[3], 0);
}

TEST(ReedSolomon, RefusesBadParameters) {
  EXPECT_THROW(ReedSolomon({0x11B, 0, 1, 16, 188}), salvor::Error);  // not primitive
  EXPECT_THROW(ReedSolomon({0x11D, 0, 3, 16, 188}), salvor::Error);  // gcd(3, 255) = 3
  EXPECT_THROW(ReedSolomon({0x11D, 0, 1, 16, 256}), salvor::Error);  // n > 255
  EXPECT_THROW(ReedSolomon({0x11D, 0, 1, 16, 16}), salvor::Error);   // no data symbols
}

TEST(ReedSolomon, MatchesLibfecDecodeRs8OnItsOwnCode) {
  // libfec's fixed CCSDS codec decode_rs_8 / encode_rs_8 (conventional basis): (255,223),
  // NROOTS 32, FCR 112, PRIM 11 (libfec fixed.h), field polynomial 0x187 (libfec
  // gen_ccsds.c builds its tables with init_rs_char(8, 0x187, 112, 11, 32, 0)).
  const ReedSolomon rs({0x187, 112, 11, 32, 255});
  std::mt19937 rng(14);
  for (int e = 0; e <= 16; ++e) {
    for (int trial = 0; trial < 20; ++trial) {
      const std::vector<uint8_t> data = random_bytes(rng, 223);
      const std::vector<uint8_t> codeword = rs.encode(data);
      std::vector<uint8_t> theirs_clean = codeword;
      encode_rs_8(theirs_clean.data(), theirs_clean.data() + 223, 0);
      ASSERT_EQ(theirs_clean, codeword) << "encoder";
      std::vector<uint8_t> received = codeword;
      std::vector<int> pos = random_positions(rng, 255, e);
      for (int p : pos) received[p] ^= static_cast<uint8_t>(1 + rng() % 255);

      std::vector<uint8_t> ours = received;
      const RsDecodeResult res = rs.decode(ours);
      std::vector<uint8_t> theirs = received;
      std::vector<int> located(32, -1);
      const int count = decode_rs_8(theirs.data(), located.data(), 0, 0);
      ASSERT_TRUE(res.ok) << "e=" << e;
      EXPECT_EQ(ours, codeword) << "e=" << e;
      EXPECT_EQ(ours, theirs) << "e=" << e;
      EXPECT_EQ(res.corrected, count) << "e=" << e;
      EXPECT_EQ(res.located, e);
      located.resize(static_cast<size_t>(std::max(count, 0)));
      std::sort(located.begin(), located.end());
      std::sort(pos.begin(), pos.end());
      EXPECT_EQ(res.positions, pos) << "e=" << e;
      EXPECT_EQ(located, pos) << "libfec's located positions, e=" << e;
    }
  }
}
