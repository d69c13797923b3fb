// The sector data decoder and its searches, on constructed sectors: the truth is the
// reference encoder (format/track_codec.hpp), the errors are placed by the test.

#include <gtest/gtest.h>

#include <random>

#include "format/rll89.hpp"
#include "format/track_codec.hpp"
#include "format/track_format.hpp"
#include "pipeline/sector_decode.hpp"

using namespace salvor;

namespace {

struct Constructed {
  format::TrackFormat fmt;
  std::vector<uint8_t> user;
  std::vector<uint8_t> bits;  // data-area channel bits as written
  std::vector<float> llr;     // confident LLRs with the written bits' signs
  uint64_t lba = 37;
};

Constructed make_sector(uint32_t seed) {
  Constructed c;
  c.fmt = format::load_track_format(std::string(SALVOR_SOURCE_DIR) + "/corpora/formats/tf1-512.toml");
  std::mt19937 rng(seed);
  c.user.resize(static_cast<size_t>(c.fmt.user_bytes));
  for (auto& b : c.user) b = static_cast<uint8_t>(rng());
  auto h = format::make_sector_header(c.fmt, 1, 0, 5);
  c.lba = h.lba;
  auto all = format::encode_sector_bits(c.fmt, h, c.user);
  size_t start = static_cast<size_t>(c.fmt.preamble_bits) + c.fmt.sync_mark.size() + static_cast<size_t>(c.fmt.header_bytes) * 9;
  c.bits.assign(all.begin() + static_cast<long>(start), all.begin() + static_cast<long>(start + c.fmt.coded_bytes * 9));
  c.llr.resize(c.bits.size());
  for (size_t i = 0; i < c.bits.size(); ++i) c.llr[i] = c.bits[i] ? 8.0f + (rng() % 100) / 10.0f : -8.0f - (rng() % 100) / 10.0f;
  return c;
}

// Replaces `n` distinct bytes of codeword `cw` by another valid 8/9 codeword one bit
// away (so the error is a wrong byte, not an invalid word that would become an
// erasure), giving the changed bit LLR magnitude `weak`. Returns the changed bits.
std::vector<size_t> damage_codeword(Constructed& c, int cw, int n, float weak, uint32_t seed) {
  std::mt19937 rng(seed);
  const auto& code = format::rll89_code();
  const int I = c.fmt.rs.interleave;
  std::vector<size_t> bytes;
  for (size_t t = static_cast<size_t>(cw); t < static_cast<size_t>(c.fmt.coded_bytes); t += static_cast<size_t>(I)) bytes.push_back(t);
  std::shuffle(bytes.begin(), bytes.end(), rng);
  std::vector<size_t> flipped;
  for (size_t t : bytes) {
    if (static_cast<int>(flipped.size()) == n) break;
    uint16_t word = 0;
    for (size_t j = 0; j < 9; ++j) word = static_cast<uint16_t>((word << 1) | c.bits[t * 9 + j]);
    for (size_t j = 0; j < 9; ++j) {
      uint16_t other = static_cast<uint16_t>(word ^ (1u << (8 - j)));
      if (code.decode(other).erasure) continue;  // not a codeword: try another bit
      size_t bit = t * 9 + j;
      c.bits[bit] ^= 1;
      c.llr[bit] = c.bits[bit] ? weak : -weak;
      flipped.push_back(bit);
      break;
    }
  }
  return flipped;
}

results::SectorAttempt decode(const Constructed& c, const pipeline::SectorDecodeOptions& o) {
  auto sb = pipeline::sector_bytes_from_bits(c.fmt, c.bits, c.llr, {});
  results::SectorAttempt a;
  a.lba = c.lba;
  pipeline::decode_sector_data(c.fmt, o, sb, a);
  return a;
}

}  // namespace

TEST(SectorDecode, CleanSectorIsGood) {
  Constructed c = make_sector(1);
  auto a = decode(c, {});
  EXPECT_EQ(a.status, results::SectorStatus::good);
  EXPECT_EQ(a.data, c.user);
}

// Ten byte errors in one codeword exceed t = 8: plain decoding fails; marking the least
// reliable bytes as erasures (2e + s <= n - k with s = 10, e = 0) recovers the sector.
TEST(SectorDecode, ErasureSearchRecoversWhatPlainDecodingCannot) {
  Constructed c = make_sector(2);
  ASSERT_EQ(damage_codeword(c, 1, 10, 0.3f, 7).size(), 10u);
  pipeline::SectorDecodeOptions plain;
  plain.erasure_search = false;
  EXPECT_NE(decode(c, plain).status, results::SectorStatus::good);
  EXPECT_FALSE(results::is_verified(decode(c, plain).status));
  auto a = decode(c, {});
  ASSERT_EQ(a.status, results::SectorStatus::corrected);
  EXPECT_EQ(a.data, c.user);
}

// Nine bit errors in one codeword, three of them among the ten weakest bits: flipping
// those three leaves six errors, within t = 8. Erasure search off, so only the
// Chase-style search can recover it.
TEST(SectorDecode, ChaseSearchRecoversWhatPlainDecodingCannot) {
  Constructed c = make_sector(3);
  auto flipped = damage_codeword(c, 0, 9, 6.0f, 11);
  ASSERT_EQ(flipped.size(), 9u);
  for (int k = 0; k < 3; ++k) c.llr[flipped[static_cast<size_t>(k)]] = c.bits[flipped[static_cast<size_t>(k)]] ? 0.2f : -0.2f;
  pipeline::SectorDecodeOptions o;
  o.erasure_search = false;
  EXPECT_FALSE(results::is_verified(decode(c, o).status));
  o.chase_bits = 10;
  auto a = decode(c, o);
  ASSERT_TRUE(results::is_verified(a.status)) << a.notes.back();
  EXPECT_EQ(a.status, results::SectorStatus::corrected);  // a search result is never "good"
  EXPECT_EQ(a.data, c.user);
}

// Far beyond what any search can fix: the result is a failure, never a verified sector
// with wrong bytes (every candidate must pass RS and the CRC-32).
TEST(SectorDecode, HopelessSectorIsNeverAcceptedWrong) {
  for (uint32_t seed = 0; seed < 20; ++seed) {
    Constructed c = make_sector(100 + seed);
    for (int cw = 0; cw < c.fmt.rs.interleave; ++cw) damage_codeword(c, cw, 30, 0.5f + cw, seed * 3 + static_cast<uint32_t>(cw));
    pipeline::SectorDecodeOptions o;
    o.chase_bits = 10;
    auto a = decode(c, o);
    if (results::is_verified(a.status)) {
      EXPECT_EQ(a.data, c.user) << "seed " << seed << ": verified with wrong bytes";
    } else {
      EXPECT_EQ(a.status, results::SectorStatus::failed);
      EXPECT_LT(a.confidence, 0.5);
    }
  }
}

// A wrong address (the descrambler seed) cannot verify.
TEST(SectorDecode, WrongAddressDoesNotVerify) {
  Constructed c = make_sector(4);
  c.lba += 1;
  EXPECT_FALSE(results::is_verified(decode(c, {}).status));
}
