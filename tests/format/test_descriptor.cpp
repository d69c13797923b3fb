// Descriptor loading and validation: the shipped descriptors load; every bad descriptor
// (written inline below as an edit of a good one) is refused with a message naming the key.

#include <gtest/gtest.h>

#include <filesystem>
#include <fstream>

#include "common/error.hpp"
#include "format/track_codec.hpp"
#include "format/track_format.hpp"

using namespace salvor::format;

namespace {

const std::string kGood = R"([format]
name = "test-512"
version = 1

[channel]
bit_rate_hz = 100.0e6
precoder = "nrzi"
initial_level = -1

[geometry]
heads = 2
cylinders = 4
sectors_per_track = 4
bits_per_track = 24000
lead_in_bits = 256

[preamble]
bits = 128
pattern = "01"

[sync]
mark = "11011111000011011001000010100110"
tolerance = 4

[header.crc]
name = "CRC-16/IBM-3740"
width = 16
poly = 0x1021
init = 0xFFFF
refin = false
refout = false
xorout = 0
check = 0x29B1

[data]
user_bytes = 512

[data.crc]
name = "CRC-32/ISO-HDLC"
width = 32
poly = 0x04C11DB7
init = 0xFFFFFFFF
refin = true
refout = true
xorout = 0xFFFFFFFF
check = 0xCBF43926

[data.scrambler]
polynomial = "x^15+x^14+1"

[data.rs]
field_polynomial = 0x11D
first_root = 0
primitive_element = 1
parity_symbols = 16
interleave = 3

[modulation]
code = "rll-8/9-0-4-4"

[postamble]
bits = 16
pattern = "01"

[gap]
bits = 64
pattern = "0001"

[servo]
wedges_per_track = 2
wedge_bits = 200
preamble_bits = 96
preamble_pattern = "001"
mark = "1100001010111011"
fill_pattern = "001"
)";

std::string edit(const std::string& from, const std::string& to) {
  std::string s = kGood;
  const size_t at = s.find(from);
  if (at == std::string::npos) ADD_FAILURE() << "test edit not found: " << from;
  else s.replace(at, from.size(), to);
  return s;
}

// Expects a refusal whose message contains every one of `needles`.
void expect_refused(const std::string& text, std::initializer_list<std::string> needles) {
  try {
    parse_track_format(text, "bad.toml");
    ADD_FAILURE() << "accepted a bad descriptor; expected: " << *needles.begin();
  } catch (const salvor::Error& e) {
    EXPECT_EQ(e.kind(), salvor::ErrorKind::input);
    EXPECT_EQ(e.where(), "bad.toml");
    for (const std::string& n : needles) EXPECT_NE(std::string(e.what()).find(n), std::string::npos) << e.what();
  }
}

}  // namespace

TEST(Descriptor, ShippedDescriptorsLoad) {
  const TrackFormat a = load_track_format(find_track_format("tf1-512"));
  EXPECT_EQ(a.name, "tf1-512");
  EXPECT_EQ(a.payload_bytes, 516);
  EXPECT_EQ(a.codeword_data_bytes, 172);
  EXPECT_EQ(a.codeword_bytes, 188);
  EXPECT_EQ(a.coded_bytes, 564);
  EXPECT_EQ(a.header_bytes, 12);
  EXPECT_EQ(a.header_bits, 108);
  EXPECT_EQ(a.sector_bits, 128 + 32 + 108 + 564 * 9 + 16);
  EXPECT_EQ(a.total_sectors(), 2u * 24u * 16u);
  EXPECT_EQ(a.lba(3, 1, 5), (3u * 2u + 1u) * 16u + 5u);
  EXPECT_EQ(a.scrambler_taps, 0x6000u);
  const TrackFormat b = load_track_format(find_track_format("tf1-4096"));
  EXPECT_EQ(b.payload_bytes, 4100);
  EXPECT_EQ(b.codeword_bytes, 215);
  EXPECT_EQ(b.coded_bytes, 4300);
  EXPECT_EQ(b.image_bytes(), a.image_bytes());
  // ~3 % slack over the shortest track that holds the sectors (common practice, no source).
  for (const TrackFormat* f : {&a, &b}) {
    TrackFormat tight = *f;
    tight.bits_per_track = f->bits_per_track * 100 / 104;
    EXPECT_FALSE(check_track_layout(tight).fits) << f->name;
    tight.bits_per_track = f->bits_per_track * 100 / 102;
    EXPECT_TRUE(check_track_layout(tight).fits) << f->name;
  }
  // A path works too; an unknown name is an input error naming it.
  EXPECT_EQ(load_track_format(std::string(SALVOR_SOURCE_DIR) + "/corpora/formats/tf1-512.toml").name, "tf1-512");
  EXPECT_THROW(find_track_format("tf9-nonesuch"), salvor::Error);
}

TEST(Descriptor, InlineGoodParses) {
  const TrackFormat f = parse_track_format(kGood, "good.toml");
  EXPECT_EQ(f.servo.wedges_per_track, 2);
  EXPECT_EQ(f.sync_mark.size(), 32u);
  EXPECT_EQ(layout_track(f).sectors.size(), 4u);
}

TEST(Descriptor, SyntaxAndStructure) {
  expect_refused(edit("heads = 2", "heads = = 2"), {"line 11", "TOML syntax error"});
  expect_refused(edit("heads = 2\n", "heads = 2\nhaeds = 3\n"), {"geometry.haeds", "unknown key"});
  expect_refused(edit("[modulation]", "[modulation2]\ncode = 1\n[modulation]"), {"modulation2", "unknown"});
  expect_refused(edit("heads = 2\n", ""), {"geometry.heads", "missing key"});
  expect_refused(edit("[postamble]\nbits = 16\npattern = \"01\"\n", ""), {"[postamble]", "missing"});
  expect_refused(edit("heads = 2", "heads = \"two\""), {"geometry.heads", "expected an integer", "a string"});
  expect_refused(edit("refin = false", "refin = 0"), {"header.crc.refin", "true or false"});
  expect_refused(edit("bit_rate_hz = 100.0e6", "bit_rate_hz = \"fast\""), {"channel.bit_rate_hz", "number"});
  expect_refused(edit("user_bytes = 512\n", "user_bytes = 512\nextra = 1\n"), {"data.extra", "unknown key"});
}

TEST(Descriptor, Ranges) {
  expect_refused(edit("heads = 2", "heads = 0"), {"geometry.heads", "outside 1..255"});
  expect_refused(edit("heads = 2", "heads = 256"), {"geometry.heads", "256"});
  expect_refused(edit("bit_rate_hz = 100.0e6", "bit_rate_hz = -5.0"), {"channel.bit_rate_hz"});
  expect_refused(edit("version = 1", "version = 2"), {"format.version"});
  expect_refused(edit("initial_level = -1", "initial_level = 0"), {"channel.initial_level"});
  expect_refused(edit("precoder = \"nrzi\"", "precoder = \"pr4\""), {"channel.precoder", "pr4"});
  expect_refused(edit("code = \"rll-8/9-0-4-4\"", "code = \"rll-2-7\""), {"modulation.code"});
  expect_refused(edit("name = \"test-512\"", "name = \"Test 512\""), {"format.name"});
  expect_refused(edit("tolerance = 4", "tolerance = 9"), {"sync.tolerance", "outside 0..8"});
}

TEST(Descriptor, ReedSolomon) {
  expect_refused(edit("field_polynomial = 0x11D", "field_polynomial = 0x11B"),
                 {"data.rs.field_polynomial", "not primitive", "order 51"});
  expect_refused(edit("field_polynomial = 0x11D", "field_polynomial = 0x2D"), {"data.rs.field_polynomial"});
  expect_refused(edit("primitive_element = 1", "primitive_element = 5"),
                 {"data.rs.primitive_element", "not coprime to 255"});
  expect_refused(edit("parity_symbols = 16", "parity_symbols = 15"), {"data.rs.parity_symbols", "odd"});
  expect_refused(edit("parity_symbols = 16", "parity_symbols = 130"), {"data.rs.parity_symbols", "outside"});
  expect_refused(edit("interleave = 3", "interleave = 2"), {"data.rs.interleave", "exceed 255"});
  expect_refused(edit("interleave = 3", "interleave = 5"), {"data.rs.interleave", "516", "not divisible"});
  expect_refused(edit("first_root = 0", "first_root = 255"), {"data.rs.first_root"});
}

TEST(Descriptor, CrcAndScrambler) {
  expect_refused(edit("check = 0x29B1", "check = 0x29B2"), {"header.crc.check", "0x29B1"});
  expect_refused(edit("width = 16", "width = 12"), {"header.crc.width", "whole number of bytes"});
  expect_refused(edit("poly = 0x1021", "poly = 0x11021"), {"header.crc.poly", "outside"});
  expect_refused(edit("poly = 0x1021", "poly = 0x1020"), {"header.crc.poly", "x^0"});
  expect_refused(edit("polynomial = \"x^15+x^14+1\"", "polynomial = \"x^15+x^13+1\""),
                 {"data.scrambler.polynomial", "not primitive"});
  expect_refused(edit("polynomial = \"x^15+x^14+1\"", "polynomial = \"x^15+x^14\""),
                 {"data.scrambler.polynomial", "constant term"});
}

TEST(Descriptor, BitStringsAndServo) {
  expect_refused(edit("mark = \"11011111000011011001000010100110\"", "mark = \"1101111100001101100100001010011\""),
                 {"sync.mark", "31 bits"});
  expect_refused(edit("mark = \"11011111000011011001000010100110\"", "mark = \"1101111100001101100100001010011x\""),
                 {"sync.mark", "'x'"});
  expect_refused(edit("pattern = \"0001\"", "pattern = \"\""), {"gap.pattern"});
  expect_refused(edit("wedge_bits = 200", "wedge_bits = 100"), {"servo.wedge_bits", "shorter than its contents"});
  expect_refused(edit("mark = \"1100001010111011\"", "mark = \"11000010101110112\""), {"servo.mark"});
}

TEST(Descriptor, TrackTooShortSaysByHowMuch) {
  // 4 sectors of 5360 bits with 64-bit gaps after a 256-bit lead-in, no wedges:
  // the last gap ends at 256 + 4 * (5360 + 64) = 21952.
  std::string text = edit("wedges_per_track = 2", "wedges_per_track = 0");
  const size_t at = text.find("bits_per_track = 24000");
  text.replace(at, 22, "bits_per_track = 21900");
  expect_refused(text, {"geometry.bits_per_track", "52 bits short", "21952"});
  text.replace(text.find("bits_per_track = 21900"), 22, "bits_per_track = 21952");
  EXPECT_NO_THROW(parse_track_format(text, "ok.toml"));
  // With wedges, the sectors must also avoid them.
  expect_refused(edit("bits_per_track = 24000", "bits_per_track = 22000"), {"geometry.bits_per_track", "bits short"});
}

TEST(Descriptor, MissingFileNamesIt) {
  try {
    load_track_format("/nonexistent/dir/x.toml");
    ADD_FAILURE();
  } catch (const salvor::Error& e) {
    EXPECT_EQ(e.where(), "/nonexistent/dir/x.toml");
    EXPECT_EQ(e.kind(), salvor::ErrorKind::input);
  }
}
