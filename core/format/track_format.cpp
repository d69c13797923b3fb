// Reading and validating a track format descriptor (TOML; keys in corpora/formats/SPEC.md).
// Every problem is reported as salvor::Error(input) with the file in `where` and the
// dotted key in the message; unknown keys are refused so that typos do not pass silently.

#include "format/track_format.hpp"

#include <cmath>
#include <cstdio>
#include <fstream>
#include <map>
#include <numeric>
#include <set>
#include <sstream>

#include <toml++/toml.h>

#include "common/error.hpp"
#include "format/crc.hpp"
#include "format/galois_field.hpp"
#include "format/scrambler.hpp"
#include "format/track_codec.hpp"

#ifndef SALVOR_SOURCE_DIR
#define SALVOR_SOURCE_DIR ""
#endif
#ifndef SALVOR_INSTALL_PREFIX
#define SALVOR_INSTALL_PREFIX ""
#endif

namespace salvor::format {

uint64_t TrackFormat::lba(int cylinder, int head, int sector) const {
  return (static_cast<uint64_t>(cylinder) * static_cast<uint64_t>(heads) + static_cast<uint64_t>(head)) *
             static_cast<uint64_t>(sectors_per_track) +
         static_cast<uint64_t>(sector);
}

uint64_t TrackFormat::total_sectors() const {
  return static_cast<uint64_t>(cylinders) * static_cast<uint64_t>(heads) *
         static_cast<uint64_t>(sectors_per_track);
}

namespace {

std::string hex(uint64_t v) {
  char buf[24];
  std::snprintf(buf, sizeof buf, "0x%llX", static_cast<unsigned long long>(v));
  return buf;
}

// Reads one table, remembering which keys were used so that the rest can be refused.
class TableReader {
 public:
  TableReader(const toml::table* table, std::string path, const std::string& origin)
      : table_(table), path_(std::move(path)), origin_(origin) {}

  bool present() const { return table_ != nullptr; }
  std::string key(const std::string& k) const { return path_.empty() ? k : path_ + "." + k; }

  [[noreturn]] void fail(const std::string& k, const std::string& what) const {
    throw_input(origin_, key(k) + ": " + what);
  }

  const toml::node* node(const std::string& k, bool required) {
    used_.insert(k);
    const toml::node* n = table_ ? table_->get(k) : nullptr;
    if (!n && required) {
      if (!table_) throw_input(origin_, "missing table [" + path_ + "] (needed for key " + key(k) + ")");
      fail(k, "missing key");
    }
    return n;
  }

  int64_t integer(const std::string& k, int64_t lo, int64_t hi) {
    const toml::node* n = node(k, true);
    if (!n->is_integer()) fail(k, "expected an integer, found " + type_name(*n));
    const int64_t v = n->as_integer()->get();
    if (v < lo || v > hi) {
      fail(k, "value " + std::to_string(v) + " is outside " + std::to_string(lo) + ".." + std::to_string(hi));
    }
    return v;
  }
  int64_t integer_or(const std::string& k, int64_t lo, int64_t hi, int64_t fallback) {
    if (!node(k, false)) return fallback;
    return integer(k, lo, hi);
  }
  double number(const std::string& k) {
    const toml::node* n = node(k, true);
    double v = 0;
    if (n->is_integer()) {
      v = static_cast<double>(n->as_integer()->get());
    } else if (n->is_floating_point()) {
      v = n->as_floating_point()->get();
    } else {
      fail(k, "expected a number, found " + type_name(*n));
    }
    if (!std::isfinite(v)) fail(k, "value is not finite");
    return v;
  }
  bool boolean(const std::string& k) {
    const toml::node* n = node(k, true);
    if (!n->is_boolean()) fail(k, "expected true or false, found " + type_name(*n));
    return n->as_boolean()->get();
  }
  std::string string(const std::string& k) {
    const toml::node* n = node(k, true);
    if (!n->is_string()) fail(k, "expected a string, found " + type_name(*n));
    return n->as_string()->get();
  }
  std::string string_or(const std::string& k, const std::string& fallback) {
    if (!node(k, false)) return fallback;
    return string(k);
  }
  // A string of '0'/'1' characters of a length within lo..hi.
  std::vector<uint8_t> bits(const std::string& k, size_t lo, size_t hi) {
    const std::string s = string(k);
    if (s.size() < lo || s.size() > hi) {
      fail(k, "has " + std::to_string(s.size()) + " bits, expected " +
                  (lo == hi ? std::to_string(lo) : std::to_string(lo) + ".." + std::to_string(hi)));
    }
    std::vector<uint8_t> out;
    for (size_t i = 0; i < s.size(); ++i) {
      if (s[i] != '0' && s[i] != '1') {
        fail(k, "character " + std::to_string(i + 1) + " is '" + std::string(1, s[i]) +
                    "', only 0 and 1 are allowed");
      }
      out.push_back(static_cast<uint8_t>(s[i] - '0'));
    }
    return out;
  }
  // Keys this reader did not ask for are errors (sub-tables listed in `children` are allowed).
  void refuse_unknown(const std::set<std::string>& children = {}) const {
    if (!table_) return;
    for (const auto& [k, v] : *table_) {
      const std::string name(k.str());
      if (!used_.count(name) && !children.count(name)) {
        throw_input(origin_, key(name) + ": unknown key");
      }
    }
  }
  const toml::table* sub(const std::string& k, bool required) {
    const toml::node* n = table_ ? table_->get(k) : nullptr;
    if (!n) {
      if (required) throw_input(origin_, "missing table [" + key(k) + "]");
      return nullptr;
    }
    if (!n->is_table()) fail(k, "expected a table, found " + type_name(*n));
    return n->as_table();
  }

  static std::string type_name(const toml::node& n) {
    switch (n.type()) {
      case toml::node_type::string: return "a string";
      case toml::node_type::integer: return "an integer";
      case toml::node_type::floating_point: return "a floating-point number";
      case toml::node_type::boolean: return "a boolean";
      case toml::node_type::array: return "an array";
      case toml::node_type::table: return "a table";
      default: return "a date or time";
    }
  }

 private:
  const toml::table* table_;
  std::string path_;
  const std::string& origin_;
  std::set<std::string> used_;
};

CrcParams read_crc(TableReader& r, int width_lo, int width_hi) {
  CrcParams c;
  c.name = r.string("name");
  c.width = static_cast<int>(r.integer("width", width_lo, width_hi));
  if (c.width % 8 != 0) r.fail("width", "value " + std::to_string(c.width) + " is not a whole number of bytes");
  const int64_t top = c.width == 32 ? 0xFFFFFFFFll : (int64_t{1} << c.width) - 1;
  c.poly = static_cast<uint32_t>(r.integer("poly", 1, top));
  if ((c.poly & 1u) == 0) r.fail("poly", "value " + hex(c.poly) + " lacks the x^0 term");
  c.init = static_cast<uint32_t>(r.integer("init", 0, top));
  c.refin = r.boolean("refin");
  c.refout = r.boolean("refout");
  c.xorout = static_cast<uint32_t>(r.integer("xorout", 0, top));
  if (r.node("check", false)) {
    const uint32_t want = static_cast<uint32_t>(r.integer("check", 0, top));
    const uint32_t got = crc_check_value(c);
    if (got != want) {
      r.fail("check", "the parameters give check value " + hex(got) + " for \"123456789\", not " + hex(want));
    }
  }
  r.refuse_unknown();
  return c;
}

void check_name(TableReader& r, const std::string& name) {
  if (name.empty() || name.size() > 64) r.fail("name", "must be 1..64 characters");
  for (char ch : name) {
    if (!((ch >= 'a' && ch <= 'z') || (ch >= '0' && ch <= '9') || ch == '-' || ch == '_' || ch == '.')) {
      r.fail("name", "\"" + name + "\" may use only a-z, 0-9, '-', '_' and '.'");
    }
  }
}

}  // namespace

TrackFormat parse_track_format(const std::string& toml_text, const std::string& origin) {
  toml::table root;
  try {
    root = toml::parse(toml_text, origin);
  } catch (const toml::parse_error& e) {
    std::ostringstream msg;
    msg << "line " << e.source().begin.line << ", column " << e.source().begin.column
        << ": TOML syntax error: " << e.description();
    throw_input(origin, msg.str());
  }

  TrackFormat f;
  f.source = origin;
  TableReader top(&root, "", origin);
  const std::set<std::string> sections = {"format", "channel", "geometry", "preamble", "sync", "header",
                                          "data", "modulation", "postamble", "gap", "servo"};
  for (const auto& [k, v] : root) {
    const std::string name(k.str());
    if (!sections.count(name)) throw_input(origin, name + ": unknown key or table");
    if (!v.is_table()) throw_input(origin, name + ": expected a table, found " + TableReader::type_name(v));
  }

  {
    TableReader r(top.sub("format", true), "format", origin);
    f.name = r.string("name");
    check_name(r, f.name);
    f.version = static_cast<int>(r.integer("version", 1, 1));
    f.description = r.string_or("description", "");
    r.refuse_unknown();
  }
  {
    TableReader r(top.sub("channel", true), "channel", origin);
    f.bit_rate_hz = r.number("bit_rate_hz");
    if (f.bit_rate_hz < 1e3 || f.bit_rate_hz > 1e11) {
      r.fail("bit_rate_hz", "value " + std::to_string(f.bit_rate_hz) + " Hz is outside 1e3..1e11");
    }
    f.precoder = r.string("precoder");
    if (f.precoder != "nrzi") r.fail("precoder", "\"" + f.precoder + "\" is not supported (only \"nrzi\")");
    f.initial_level = static_cast<int>(r.integer("initial_level", -1, 1));
    if (f.initial_level == 0) r.fail("initial_level", "must be -1 or +1");
    r.refuse_unknown();
  }
  {
    TableReader r(top.sub("geometry", true), "geometry", origin);
    f.heads = static_cast<int>(r.integer("heads", 1, 255));
    f.cylinders = static_cast<int>(r.integer("cylinders", 1, 65535));
    f.sectors_per_track = static_cast<int>(r.integer("sectors_per_track", 1, 255));
    f.bits_per_track = static_cast<size_t>(r.integer("bits_per_track", 1, int64_t{1} << 30));
    f.lead_in_bits = static_cast<int>(r.integer("lead_in_bits", 0, 1 << 20));
    if (f.total_sectors() > 0xFFFFFFFFull) {
      r.fail("cylinders", "the geometry has " + std::to_string(f.total_sectors()) +
                              " sectors, more than a 32-bit LBA can address");
    }
    r.refuse_unknown();
  }
  {
    TableReader r(top.sub("preamble", true), "preamble", origin);
    f.preamble_bits = static_cast<int>(r.integer("bits", 8, 1 << 16));
    f.preamble_pattern = r.bits("pattern", 1, 64);
    r.refuse_unknown();
  }
  {
    TableReader r(top.sub("sync", true), "sync", origin);
    f.sync_mark = r.bits("mark", 32, 32);  // tf1: a 32-bit mark (SPEC.md, "Sync mark")
    const int len = static_cast<int>(f.sync_mark.size());
    f.sync_tolerance = static_cast<int>(r.integer("tolerance", 0, len / 4));
    r.refuse_unknown();
  }
  {
    TableReader r(top.sub("header", true), "header", origin);
    TableReader c(r.sub("crc", true), "header.crc", origin);
    f.header_crc = read_crc(c, 8, 32);
    r.refuse_unknown({"crc"});
  }
  {
    TableReader r(top.sub("data", true), "data", origin);
    f.user_bytes = static_cast<int>(r.integer("user_bytes", 1, 1 << 16));
    {
      TableReader c(r.sub("crc", true), "data.crc", origin);
      f.data_crc = read_crc(c, 8, 32);
    }
    {
      TableReader s(r.sub("scrambler", true), "data.scrambler", origin);
      f.scrambler = s.string("polynomial");
      parse_scrambler_polynomial(f.scrambler, origin, "data.scrambler.polynomial", f.scrambler_degree,
                                 f.scrambler_taps);
      if (f.scrambler_degree > 24) {
        s.fail("polynomial", "degree " + std::to_string(f.scrambler_degree) + " is above 24");
      }
      const uint64_t full = (uint64_t{1} << f.scrambler_degree) - 1;
      const uint64_t period = scrambler_period({f.scrambler_degree, f.scrambler_taps, 1}, full);
      if (period != full) {
        s.fail("polynomial", "\"" + f.scrambler + "\" is not primitive: the sequence repeats after " +
                                 std::to_string(period) + " bits instead of " + std::to_string(full));
      }
      s.refuse_unknown();
    }
    {
      TableReader s(r.sub("rs", true), "data.rs", origin);
      ReedSolomonParams& rs = f.rs;
      rs.field_polynomial = static_cast<unsigned>(s.integer("field_polynomial", 0x100, 0x1FF));
      const int order = multiplicative_order_of_x(rs.field_polynomial);
      if (order != 255) {
        s.fail("field_polynomial", "polynomial " + hex(rs.field_polynomial) +
                                       " is not primitive over GF(2^8): x has multiplicative order " +
                                       std::to_string(order) + ", not 255");
      }
      rs.first_root = static_cast<int>(s.integer("first_root", 0, 254));
      rs.primitive_element = static_cast<int>(s.integer("primitive_element", 1, 254));
      if (std::gcd(rs.primitive_element, 255) != 1) {
        s.fail("primitive_element", "value " + std::to_string(rs.primitive_element) +
                                        " is not coprime to 255, so its powers do not give distinct roots");
      }
      rs.parity_symbols = static_cast<int>(s.integer("parity_symbols", 2, 128));
      if (rs.parity_symbols % 2 != 0) {
        s.fail("parity_symbols", "value " + std::to_string(rs.parity_symbols) +
                                     " is odd; tf1 needs an even number (t = parity/2 errors)");
      }
      rs.interleave = static_cast<int>(s.integer("interleave", 1, 255));
      s.refuse_unknown();
    }
    r.refuse_unknown({"crc", "scrambler", "rs"});
  }
  {
    TableReader r(top.sub("modulation", true), "modulation", origin);
    f.modulation = r.string("code");
    if (f.modulation != "rll-8/9-0-4-4") {
      r.fail("code", "\"" + f.modulation + "\" is not supported (only \"rll-8/9-0-4-4\")");
    }
    r.refuse_unknown();
  }
  {
    TableReader r(top.sub("postamble", true), "postamble", origin);
    f.postamble_bits = static_cast<int>(r.integer("bits", 0, 1 << 16));
    f.postamble_pattern = r.bits("pattern", 1, 64);
    r.refuse_unknown();
  }
  {
    TableReader r(top.sub("gap", true), "gap", origin);
    f.gap_bits = static_cast<int>(r.integer("bits", 0, 1 << 20));
    f.gap_pattern = r.bits("pattern", 1, 64);
    r.refuse_unknown();
  }
  {
    TableReader r(top.sub("servo", false), "servo", origin);
    if (r.present()) {
      f.servo.wedges_per_track = static_cast<int>(r.integer("wedges_per_track", 0, 255));
      // Without wedges the other keys may be left out; present ones are still checked.
      if (f.servo.wedges_per_track > 0 || r.node("wedge_bits", false)) {
        f.servo.wedge_bits = static_cast<int>(r.integer("wedge_bits", 1, 1 << 20));
        f.servo.preamble_bits = static_cast<int>(r.integer("preamble_bits", 0, 1 << 16));
        f.servo.preamble_pattern = r.bits("preamble_pattern", 1, 64);
        f.servo.mark = r.bits("mark", 16, 16);  // tf1: a 16-bit servo mark
        f.servo.fill_pattern = r.bits("fill_pattern", 1, 64);
        const int needed = f.servo.preamble_bits + static_cast<int>(f.servo.mark.size()) +
                           kServoFieldBytes * 9;
        if (f.servo.wedge_bits < needed) {
          r.fail("wedge_bits", "value " + std::to_string(f.servo.wedge_bits) + " is shorter than its contents (" +
                                   std::to_string(needed) + " bits: preamble, mark, wedge index and cylinder)");
        }
      }
      r.refuse_unknown();
    }
  }

  // Derived sizes.
  f.header_bytes = kHeaderFieldBytes + f.header_crc.width / 8;
  f.data_crc_bytes = f.data_crc.width / 8;
  f.payload_bytes = f.user_bytes + f.data_crc_bytes;
  if (f.payload_bytes % f.rs.interleave != 0) {
    throw_input(origin, "data.rs.interleave: user data plus CRC (" + std::to_string(f.payload_bytes) +
                            " bytes) is not divisible by the interleave " + std::to_string(f.rs.interleave));
  }
  f.codeword_data_bytes = f.payload_bytes / f.rs.interleave;
  f.codeword_bytes = f.codeword_data_bytes + f.rs.parity_symbols;
  if (f.codeword_bytes > 255) {
    throw_input(origin, "data.rs.interleave: codewords of " + std::to_string(f.codeword_data_bytes) +
                            " data + " + std::to_string(f.rs.parity_symbols) + " parity symbols (n = " +
                            std::to_string(f.codeword_bytes) +
                            ") exceed 255, the longest RS code over GF(2^8); raise the interleave");
  }
  f.coded_bytes = f.codeword_bytes * f.rs.interleave;
  f.header_bits = f.header_bytes * 9;
  f.data_bits = f.coded_bytes * 9;
  f.sector_bits = f.preamble_bits + static_cast<int>(f.sync_mark.size()) + f.header_bits + f.data_bits +
                  f.postamble_bits;

  // The track must hold its sectors (layout_track reports the shortfall).
  const LayoutCheck check = check_track_layout(f);
  if (!check.fits) throw_input(origin, check.problem);
  return f;
}

TrackFormat load_track_format(const std::filesystem::path& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) throw_input(path.string(), "cannot open the track format descriptor");
  std::ostringstream text;
  text << in.rdbuf();
  if (in.bad()) throw_input(path.string(), "read error");
  TrackFormat f = parse_track_format(text.str(), path.string());
  f.source = path;
  return f;
}

std::filesystem::path find_track_format(const std::string& name_or_path) {
  namespace fs = std::filesystem;
  if (name_or_path.empty()) throw_usage("format", "empty format name");
  const bool looks_like_path = name_or_path.find('/') != std::string::npos ||
                               (name_or_path.size() > 5 && name_or_path.ends_with(".toml"));
  std::error_code ec;
  if (looks_like_path) {
    if (fs::is_regular_file(name_or_path, ec)) return fs::path(name_or_path);
    throw_input(name_or_path, "track format descriptor not found");
  }
  std::vector<fs::path> tried;
  for (const char* base : {SALVOR_SOURCE_DIR "/corpora/formats", SALVOR_INSTALL_PREFIX "/share/salvor/formats"}) {
    if (std::string(base).front() == '/') {
      const fs::path candidate = fs::path(base) / (name_or_path + ".toml");
      if (fs::is_regular_file(candidate, ec)) return candidate;
      tried.push_back(candidate);
    }
  }
  if (fs::is_regular_file(name_or_path, ec)) return fs::path(name_or_path);
  std::string where;
  for (const auto& t : tried) where += (where.empty() ? "" : ", ") + t.string();
  throw_input(name_or_path, "no track format of this name (looked for " + where + ")");
}

}  // namespace salvor::format
