// Reference encoder and bit-exact parser: noiseless round trips of whole tracks (tf1-512
// and tf1-4096, with servo wedges), the sync search, and light damage that the header CRC
// must catch or RS must correct.

#include <gtest/gtest.h>

#include <random>

#include "format/rll89.hpp"
#include "format/track_codec.hpp"
#include "format/track_format.hpp"

using namespace salvor::format;

namespace {

std::vector<uint8_t> random_image(const TrackFormat& f, uint32_t seed) {
  std::mt19937 rng(seed);
  std::vector<uint8_t> image(f.image_bytes());
  for (auto& b : image) b = static_cast<uint8_t>(rng());
  return image;
}

std::span<const uint8_t> sector_of(const TrackFormat& f, const std::vector<uint8_t>& image, uint64_t lba) {
  return std::span<const uint8_t>(image).subspan(lba * static_cast<size_t>(f.user_bytes),
                                                 static_cast<size_t>(f.user_bytes));
}

class TrackRoundTrip : public ::testing::TestWithParam<const char*> {};

}  // namespace

TEST_P(TrackRoundTrip, NoiselessTrackParsesBitExact) {
  const TrackFormat f = load_track_format(find_track_format(GetParam()));
  ASSERT_GT(f.servo.wedges_per_track, 0);
  const std::vector<uint8_t> image = random_image(f, 1);
  const int cylinder = f.cylinders - 1, head = f.heads - 1;
  const std::vector<uint8_t> bits = encode_track(f, image, cylinder, head);
  ASSERT_EQ(bits.size(), f.bits_per_track);
  const TrackLayout layout = layout_track(f);

  const std::vector<ParsedSector> parsed = parse_track(f, bits);
  ASSERT_EQ(parsed.size(), static_cast<size_t>(f.sectors_per_track));
  for (size_t s = 0; s < parsed.size(); ++s) {
    const ParsedSector& p = parsed[s];
    const SectorPlacement& want = layout.sectors[s];
    EXPECT_EQ(p.where.sync_bit, want.sync_bit);
    EXPECT_EQ(p.where.header_bit, want.header_bit);
    EXPECT_EQ(p.where.data_bit, want.data_bit);
    EXPECT_EQ(p.where.end_bit, want.end_bit);
    EXPECT_EQ(p.sync_distance, 0);
    ASSERT_TRUE(p.header.has_value()) << "sector " << s;
    EXPECT_EQ(p.header->lba, f.lba(cylinder, head, static_cast<int>(s)));
    EXPECT_EQ(p.header->cylinder, cylinder);
    EXPECT_EQ(p.header->head, head);
    EXPECT_EQ(p.header->sector, s);
    EXPECT_EQ(p.header->flags, 0);
    EXPECT_TRUE(p.data_verified);
    EXPECT_EQ(p.rs_corrected, 0);
    EXPECT_EQ(p.erasures_used, 0);
    EXPECT_FALSE(p.lba_inferred);
    const auto expected = sector_of(f, image, p.header->lba);
    EXPECT_TRUE(std::equal(p.user_data.begin(), p.user_data.end(), expected.begin(), expected.end()));
  }
  // The coded part of every sector (sync mark, header, data) keeps G <= 4 and I <= 4.
  for (const SectorPlacement& s : layout.sectors) {
    const auto coded = std::span<const uint8_t>(bits).subspan(s.sync_bit, s.end_bit - f.postamble_bits - s.sync_bit);
    EXPECT_LE(longest_zero_run(coded), 4u);
    EXPECT_LE(longest_zero_run(coded, 0, 2), 4u);
    EXPECT_LE(longest_zero_run(coded, 1, 2), 4u);
  }
}

TEST_P(TrackRoundTrip, SyncSearchFindsEveryMarkAndNothingElse) {
  const TrackFormat f = load_track_format(find_track_format(GetParam()));
  const std::vector<uint8_t> image = random_image(f, 2);
  const std::vector<uint8_t> bits = encode_track(f, image, 0, 0);
  const TrackLayout layout = layout_track(f);
  // The parser finds every mark, at distance 0, and nothing else.
  const std::vector<ParsedSector> parsed = parse_track(f, bits);
  ASSERT_EQ(parsed.size(), layout.sectors.size());
  for (size_t i = 0; i < parsed.size(); ++i) {
    EXPECT_EQ(parsed[i].where.sync_bit, layout.sectors[i].sync_bit);
    EXPECT_EQ(parsed[i].sync_distance, 0);
  }
  // A raw search over the whole track, wedges included: outside the coded data (which the
  // parser skips once a mark is found) the only hits are the marks themselves.
  const std::vector<SyncHit> hits = find_sync_marks(bits, f.sync_mark, f.sync_tolerance);
  size_t marks = 0, in_data = 0;
  for (const SyncHit& h : hits) {
    bool inside = false;
    for (const SectorPlacement& s : layout.sectors) {
      if (h.position >= s.header_bit && h.position < s.end_bit) inside = true;
    }
    if (inside) {
      ++in_data;
      continue;
    }
    ASSERT_LT(marks, layout.sectors.size());
    EXPECT_EQ(h.position, layout.sectors[marks].sync_bit);
    EXPECT_EQ(h.distance, 0);
    ++marks;
  }
  EXPECT_EQ(marks, layout.sectors.size());
  // Scrambled data matches a 32-bit mark within 4 at about sum_{i<=4} C(32,i)/2^32 = 9.7e-6
  // per position (binomial tail): under 1 expected per track, so 10 would
  // mean the data is not random-looking.
  EXPECT_LE(in_data, 10u);
}

TEST_P(TrackRoundTrip, ServoWedgeContents) {
  const TrackFormat f = load_track_format(find_track_format(GetParam()));
  const std::vector<uint8_t> image = random_image(f, 3);
  const int cylinder = 13;
  const std::vector<uint8_t> bits = encode_track(f, image, cylinder, 0);
  for (const ServoPlacement& w : layout_track(f).wedges) {
    const size_t mark_at = w.start_bit + static_cast<size_t>(f.servo.preamble_bits);
    EXPECT_TRUE(std::equal(f.servo.mark.begin(), f.servo.mark.end(), bits.begin() + static_cast<std::ptrdiff_t>(mark_at)));
    std::vector<uint8_t> bytes(3), flags(3);
    rll89_code().decode_bits(std::span<const uint8_t>(bits).subspan(mark_at + f.servo.mark.size(), 27), bytes, flags);
    EXPECT_EQ(bytes[0], w.wedge);
    EXPECT_EQ((bytes[1] << 8) | bytes[2], gray_code(cylinder));  // 13 -> 0b1011 (Gray)
    EXPECT_EQ(gray_code(cylinder), 0b1011);  // 1101 xor 0110
  }
}

INSTANTIATE_TEST_SUITE_P(Tf1, TrackRoundTrip, ::testing::Values("tf1-512", "tf1-4096"));

TEST(Track, HeaderBitFlipsAreNeverAcceptedWrong) {
  const TrackFormat f = load_track_format(find_track_format("tf1-512"));
  const std::vector<uint8_t> image = random_image(f, 4);
  const std::vector<uint8_t> clean = encode_track(f, image, 2, 1);
  const SectorPlacement target = layout_track(f).sectors[5];
  int rejected = 0, repaired = 0;
  for (int b = 0; b < f.header_bits; ++b) {
    std::vector<uint8_t> bits = clean;
    bits[target.header_bit + static_cast<size_t>(b)] ^= 1;
    const std::vector<ParsedSector> parsed = parse_track(f, bits);
    ASSERT_EQ(parsed.size(), 16u);
    const ParsedSector& p = parsed[5];
    if (p.header) {
      // The 8/9 best guess restored the byte: the header must then be exactly right.
      EXPECT_EQ(p.header->lba, f.lba(2, 1, 5));
      EXPECT_EQ(p.header->sector, 5);
      ++repaired;
    } else {
      // Caught: the LBA comes from the layout and the other headers, the data still verifies.
      EXPECT_TRUE(p.lba_inferred);
      EXPECT_EQ(p.lba, f.lba(2, 1, 5));
      EXPECT_TRUE(p.data_verified);
      ++rejected;
    }
  }
  EXPECT_GT(rejected, 0);
  // A flip that turns one codeword into another valid one is caught by the CRC alone.
  std::vector<uint8_t> hdr = encode_header_bytes(f, make_sector_header(f, 2, 1, 5));
  EXPECT_TRUE(decode_header_bytes(f, hdr).has_value());
  const Rll89Code& code = rll89_code();
  bool found = false;
  for (int bit = 0; bit < 9 && !found; ++bit) {
    const uint16_t flipped = static_cast<uint16_t>(code.encode(hdr[7]) ^ (1u << bit));
    const Rll89Decoded d = code.decode(flipped);
    if (!d.erasure) {
      std::vector<uint8_t> bad = hdr;
      bad[7] = d.byte;
      EXPECT_FALSE(decode_header_bytes(f, bad).has_value());
      found = true;
    }
  }
  EXPECT_TRUE(found);
  // Reserved flag bits and another version are refused even with a correct CRC; the
  // relocated flag is accepted.
  SectorHeader odd = make_sector_header(f, 2, 1, 5);
  odd.flags = 0x02;
  EXPECT_FALSE(decode_header_bytes(f, encode_header_bytes(f, odd)).has_value());
  odd.flags = kHeaderFlagRelocated;
  ASSERT_TRUE(decode_header_bytes(f, encode_header_bytes(f, odd)).has_value());
  EXPECT_EQ(decode_header_bytes(f, encode_header_bytes(f, odd))->flags, kHeaderFlagRelocated);
  TrackFormat v2 = f;
  v2.version = 2;
  EXPECT_FALSE(decode_header_bytes(f, encode_header_bytes(v2, make_sector_header(f, 2, 1, 5))).has_value());
}

TEST(Track, FlippedDataBitsAreCorrectedAndReported) {
  const TrackFormat f = load_track_format(find_track_format("tf1-512"));
  const std::vector<uint8_t> image = random_image(f, 5);
  std::vector<uint8_t> bits = encode_track(f, image, 1, 0);
  const SectorPlacement target = layout_track(f).sectors[9];
  // Six flips in six different coded bytes: at most 2 errors per codeword (t = 8).
  for (int byte : {0, 50, 101, 202, 350, 563}) bits[target.data_bit + static_cast<size_t>(byte) * 9 + 4] ^= 1;
  // And two flips in the sync mark (tolerance 4).
  bits[target.sync_bit + 3] ^= 1;
  bits[target.sync_bit + 20] ^= 1;
  const std::vector<ParsedSector> parsed = parse_track(f, bits);
  ASSERT_EQ(parsed.size(), 16u);
  const ParsedSector& p = parsed[9];
  EXPECT_EQ(p.sync_distance, 2);
  EXPECT_EQ(p.where.sync_bit, target.sync_bit);
  ASSERT_TRUE(p.header);
  EXPECT_TRUE(p.data_verified);
  EXPECT_EQ(p.rs_corrected, 6);
  int sum = 0;
  for (int c : p.corrected_per_interleave) sum += c;
  EXPECT_EQ(sum, 6);
  const auto expected = sector_of(f, image, f.lba(1, 0, 9));
  EXPECT_TRUE(std::equal(p.user_data.begin(), p.user_data.end(), expected.begin(), expected.end()));
  for (size_t s = 0; s < parsed.size(); ++s) {
    if (s != 9) {
      EXPECT_EQ(parsed[s].rs_corrected, 0);
    }
  }
}

TEST(Track, TooManyErrorsAreReportedNotHidden) {
  const TrackFormat f = load_track_format(find_track_format("tf1-512"));
  const std::vector<uint8_t> image = random_image(f, 6);
  std::vector<uint8_t> bits = encode_track(f, image, 0, 1);
  const SectorPlacement target = layout_track(f).sectors[3];
  // 30 corrupted bytes in codeword 0 (positions p*3): far beyond t = 8.
  for (int p = 0; p < 30; ++p) {
    for (int k = 0; k < 9; ++k) bits[target.data_bit + static_cast<size_t>(p) * 27 + k] ^= (k % 2);
  }
  const std::vector<ParsedSector> parsed = parse_track(f, bits);
  ASSERT_EQ(parsed.size(), 16u);
  EXPECT_FALSE(parsed[3].data_verified);
  EXPECT_EQ(parsed[3].corrected_per_interleave.at(0), -1);
  EXPECT_TRUE(parsed[4].data_verified);
}

TEST(Track, TruncatedAndRandomStreamsDoNotCrash) {
  const TrackFormat f = load_track_format(find_track_format("tf1-512"));
  const std::vector<uint8_t> image = random_image(f, 7);
  const std::vector<uint8_t> bits = encode_track(f, image, 0, 0);
  const SectorPlacement cut_in = layout_track(f).sectors[2];
  const std::vector<uint8_t> cut(bits.begin(), bits.begin() + static_cast<std::ptrdiff_t>(cut_in.data_bit + 900));
  const std::vector<ParsedSector> parsed = parse_track(f, cut);
  ASSERT_EQ(parsed.size(), 3u);
  EXPECT_TRUE(parsed[1].data_verified);
  EXPECT_TRUE(parsed[2].truncated);
  EXPECT_TRUE(parsed[2].header.has_value());
  EXPECT_FALSE(parsed[2].data_verified);

  std::mt19937 rng(8);
  std::vector<uint8_t> noise(f.bits_per_track);
  for (auto& b : noise) b = static_cast<uint8_t>(rng() & 1);
  for (const ParsedSector& p : parse_track(f, noise)) {
    EXPECT_FALSE(p.data_verified);
    EXPECT_EQ(p.user_data.size(), static_cast<size_t>(f.user_bytes));
  }
  EXPECT_TRUE(parse_track(f, std::vector<uint8_t>{}).empty());
}

TEST(Track, NrziLevelsAndPolarity) {
  // b_k = a_k xor b_{k-1} from b_{-1} = -1: the NRZI write convention (a 1 is a transition;
  // K. A. S. Immink, "Codes for Mass Data Storage Systems", 2004).
  const std::vector<uint8_t> a = {1, 0, 1, 1, 0, 0, 1, 0};
  const std::vector<int8_t> b = nrzi_levels(a);
  EXPECT_EQ(b, (std::vector<int8_t>{1, 1, -1, 1, 1, 1, -1, -1}));
  EXPECT_EQ(nrzi_levels(a, +1), (std::vector<int8_t>{-1, -1, 1, -1, -1, -1, 1, 1}));
  // Channel bits come back from transitions alone, whatever the polarity.
  for (int8_t start : {int8_t{-1}, int8_t{1}}) {
    const std::vector<int8_t> lv = nrzi_levels(a, start);
    int8_t prev = start;
    for (size_t k = 0; k < a.size(); ++k) {
      EXPECT_EQ(a[k], lv[k] != prev ? 1 : 0);
      prev = lv[k];
    }
  }
}

TEST(Track, PayloadRoundTripWithErasures) {
  const TrackFormat f = load_track_format(find_track_format("tf1-4096"));
  std::mt19937 rng(9);
  std::vector<uint8_t> user(static_cast<size_t>(f.user_bytes));
  for (auto& b : user) b = static_cast<uint8_t>(rng());
  const std::vector<uint8_t> coded = encode_sector_payload(f, 777, user);
  ASSERT_EQ(coded.size(), static_cast<size_t>(f.coded_bytes));
  std::vector<uint8_t> damaged = coded, flags(coded.size(), 0);
  // 10 erased bytes in codeword 4 (t = 5 errors, but 10 erasures), 5 errors in codeword 7.
  for (int p = 0; p < 10; ++p) {
    damaged[static_cast<size_t>(p) * 20 + 4] ^= 0x5A;
    flags[static_cast<size_t>(p) * 20 + 4] = 1;
  }
  for (int p = 100; p < 105; ++p) damaged[static_cast<size_t>(p) * 20 + 7] ^= 0xFF;
  const PayloadDecode d = decode_sector_payload(f, 777, damaged, flags);
  EXPECT_TRUE(d.verified);
  EXPECT_EQ(d.user_data, user);
  EXPECT_EQ(d.erasures_used, 10);
  EXPECT_EQ(d.corrected_per_interleave.at(4), 10);
  EXPECT_EQ(d.corrected_per_interleave.at(7), 5);
  EXPECT_EQ(d.rs_corrected, 15);
  // The wrong LBA descrambles to garbage: the CRC-32 says so.
  EXPECT_FALSE(decode_sector_payload(f, 778, coded).verified);
  // Without the erasure flags, 10 errors exceed t = 5.
  EXPECT_FALSE(decode_sector_payload(f, 777, damaged).verified);
}

TEST(Track, SyncSearchIsChunkInvariant) {
  const TrackFormat f = load_track_format(find_track_format("tf1-512"));
  const std::vector<uint8_t> image = random_image(f, 10);
  std::vector<uint8_t> bits = encode_track(f, image, 4, 1);
  // Some damage so that distances vary and clusters form.
  std::mt19937 rng(10);
  for (int i = 0; i < 3000; ++i) bits[rng() % bits.size()] ^= 1;
  const std::vector<SyncHit> whole = find_sync_marks(bits, f.sync_mark, f.sync_tolerance);
  ASSERT_GE(whole.size(), 10u);
  for (size_t chunk : {size_t{1}, size_t{7}, size_t{4096}, bits.size()}) {
    for (size_t out_room : {size_t{1}, size_t{64}}) {
      SyncSearch search({f.sync_mark, f.sync_tolerance});
      std::vector<SyncHit> hits, buffer(out_room);
      size_t done = 0;
      while (done < bits.size()) {
        const size_t n = std::min(chunk, bits.size() - done);
        size_t used = 0;
        while (used < n) {
          const salvor::Progress p = search.process(std::span<const uint8_t>(bits).subspan(done + used, n - used), buffer);
          hits.insert(hits.end(), buffer.begin(), buffer.begin() + static_cast<std::ptrdiff_t>(p.produced));
          used += p.consumed;
        }
        done += n;
      }
      if (auto last = search.flush()) hits.push_back(*last);
      ASSERT_EQ(hits.size(), whole.size()) << "chunk " << chunk;
      for (size_t i = 0; i < hits.size(); ++i) {
        EXPECT_EQ(hits[i].position, whole[i].position);
        EXPECT_EQ(hits[i].distance, whole[i].distance);
      }
    }
  }
  // The clusters rule: no two hits closer than a mark length.
  for (size_t i = 1; i < whole.size(); ++i) EXPECT_GE(whole[i].position, whole[i - 1].position + f.sync_mark.size());
}
