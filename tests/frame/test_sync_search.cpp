#include <gtest/gtest.h>

#include <random>

#include "common/error.hpp"
#include "frame/sync_search.hpp"

using namespace salvor::frame;

static std::vector<uint8_t> bits_of(uint32_t v) {
  std::vector<uint8_t> b(32);
  for (int i = 0; i < 32; ++i) b[i] = (v >> (31 - i)) & 1;
  return b;
}

// A 32-bit test mark (the value is arbitrary here; the format's own mark is chosen in SPEC.md).
static const std::vector<uint8_t> kMark = bits_of(0xFE6B2840u);

static std::vector<uint8_t> stream_with_marks(std::mt19937& rng, std::vector<uint64_t>& ends, int flips) {
  std::vector<uint8_t> s;
  for (int k = 0; k < 20; ++k) {
    for (int i = 0; i < 200; ++i) s.push_back((i / 2) % 2);  // 2T-like preamble bits
    std::vector<uint8_t> m = kMark;
    for (int f = 0; f < flips; ++f) m[rng() % 32] ^= 1;
    s.insert(s.end(), m.begin(), m.end());
    ends.push_back(s.size());
    for (int i = 0; i < 300; ++i) s.push_back(rng() & 1);
  }
  return s;
}

TEST(SyncSearch, FindsEveryMarkWithinToleranceAtTheExactPosition) {
  std::mt19937 rng(11);
  std::vector<uint64_t> ends;
  auto s = stream_with_marks(rng, ends, 2);
  SyncSearch search({kMark, 4});
  std::vector<SyncHit> hits;
  search.process(s, hits);
  search.flush(hits);
  // Every planted mark is found at its exact end position. In 20 x 300 random bits the
  // expected number of false alarms at E = 4 is 6000 * 9.7e-6 = 0.06 (binomial tail,
  // computed), so with this seed there are none.
  ASSERT_EQ(hits.size(), ends.size());
  for (size_t i = 0; i < ends.size(); ++i) {
    EXPECT_EQ(hits[i].end_bit, ends[i]);
    EXPECT_LE(hits[i].distance, 2);
  }
}

TEST(SyncSearch, ChunkingDoesNotChangeHits) {
  std::mt19937 rng(3);
  std::vector<uint64_t> ends;
  auto s = stream_with_marks(rng, ends, 3);
  std::vector<SyncHit> whole;
  {
    SyncSearch a({kMark, 4});
    a.process(s, whole);
    a.flush(whole);
  }
  for (size_t chunk : {1u, 7u, 4096u}) {
    SyncSearch b({kMark, 4});
    std::vector<SyncHit> parts;
    for (size_t i = 0; i < s.size(); i += chunk)
      b.process(std::span(s).subspan(i, std::min(chunk, s.size() - i)), parts);
    b.flush(parts);
    ASSERT_EQ(parts.size(), whole.size()) << "chunk " << chunk;
    for (size_t i = 0; i < parts.size(); ++i) {
      EXPECT_EQ(parts[i].end_bit, whole[i].end_bit);
      EXPECT_EQ(parts[i].distance, whole[i].distance);
    }
  }
}

TEST(SyncSearch, BeyondToleranceIsNotFound) {
  std::mt19937 rng(5);
  std::vector<uint64_t> ends;
  auto s = stream_with_marks(rng, ends, 6);  // up to 6 flips: some marks exceed E = 1
  SyncSearch search({kMark, 1});
  std::vector<SyncHit> hits;
  search.process(s, hits);
  search.flush(hits);
  EXPECT_LT(hits.size(), ends.size());
  for (const auto& h : hits) EXPECT_LE(h.distance, 1);
}

TEST(SyncSearch, RefusesBadConfig) {
  EXPECT_THROW(SyncSearch({std::vector<uint8_t>(4, 1), 0}), salvor::Error);
  EXPECT_THROW(SyncSearch({kMark, 16}), salvor::Error);
  auto bad = kMark;
  bad[3] = 2;
  EXPECT_THROW(SyncSearch({bad, 2}), salvor::Error);
}
