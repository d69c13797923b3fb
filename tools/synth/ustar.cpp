#include "synth/ustar.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <numbers>
#include <sstream>

#include "common/error.hpp"
#include "synth/rng.hpp"

namespace salvor::synth {

namespace {

void put_octal(uint8_t* field, size_t width, uint64_t value) {
  // width-1 octal digits, zero-padded, then NUL.
  std::string s(width - 1, '0');
  for (size_t i = width - 1; i-- > 0 && value;) {
    s[i] = static_cast<char>('0' + (value & 7));
    value >>= 3;
  }
  if (value) throw_usage("archive", "value does not fit a ustar octal field");
  std::memcpy(field, s.data(), width - 1);
  field[width - 1] = 0;
}

void put_text(uint8_t* field, size_t width, const std::string& s) {
  if (s.size() > width) throw_usage("archive", "'" + s + "' is too long for a ustar field");
  std::memcpy(field, s.data(), s.size());
}

std::vector<uint8_t> bytes_of(const std::string& s) { return {s.begin(), s.end()}; }

}  // namespace

std::vector<uint8_t> build_ustar(const std::vector<ArchiveMember>& members, const UstarOptions& opt) {
  std::vector<uint8_t> out;
  for (const ArchiveMember& m : members) {
    if (m.name.empty() || m.name.size() >= 100) throw_usage("archive", "member name '" + m.name + "' must be 1..99 bytes");
    uint8_t h[512] = {};
    put_text(h + 0, 100, m.name);
    put_octal(h + 100, 8, m.mode);
    put_octal(h + 108, 8, 1000);  // uid
    put_octal(h + 116, 8, 1000);  // gid
    put_octal(h + 124, 12, m.data.size());
    put_octal(h + 136, 12, opt.mtime);
    std::memset(h + 148, ' ', 8);  // checksum counts as spaces
    h[156] = '0';                  // regular file
    std::memcpy(h + 257, "ustar", 6);  // magic "ustar\0"
    std::memcpy(h + 263, "00", 2);     // version
    put_text(h + 265, 32, opt.owner);
    put_text(h + 297, 32, opt.group);
    unsigned sum = 0;
    for (uint8_t b : h) sum += b;
    // Six octal digits, NUL, space (the customary layout).
    char cs[8];
    std::snprintf(cs, sizeof cs, "%06o", sum);
    std::memcpy(h + 148, cs, 6);
    h[154] = 0;
    h[155] = ' ';
    out.insert(out.end(), h, h + 512);
    out.insert(out.end(), m.data.begin(), m.data.end());
    out.resize((out.size() + 511) / 512 * 512, 0);
  }
  out.resize(out.size() + 1024, 0);  // end of archive: two zero blocks
  return out;
}

std::vector<ArchiveMember> demo_archive_members(uint64_t seed) {
  RandomStream rng(derive_seed(seed, {static_cast<uint64_t>(StreamKind::image), 1}));
  std::vector<ArchiveMember> m;

  m.push_back({"survey/README.txt", bytes_of(
      "Vellmoor Basin survey, spring season\n"
      "====================================\n\n"
      "This drive travelled with the field kit of a small survey team (an invented team;\n"
      "the names below are roles, not people). It holds the daily notes, the logger\n"
      "exports and one scanned sketch of the station layout.\n\n"
      "  notes/       daily notes, plain text\n"
      "  loggers/     soil temperature and moisture, one CSV per station\n"
      "  sketch.pgm   station layout, greyscale netpbm picture\n\n"
      "The drive was dropped from the truck bed on the way back from the basin.\n")});

  const char* weather[] = {"clear, light wind from the ridge", "low cloud until noon, then sun",
                           "steady drizzle, loggers checked under the tarp", "cold morning, frost on the cables",
                           "gusty, two stakes re-driven at station C"};
  for (int day = 1; day <= 12; ++day) {
    std::ostringstream o;
    o << "Day " << day << "\n-----\n";
    o << "Weather: " << weather[(day * 3) % 5] << ".\n";
    o << "Crew: lead surveyor, two technicians, the driver.\n\n";
    for (int s = 0; s < 6; ++s) {
      const char st = static_cast<char>('A' + s);
      const double depth = 10 + 5 * s;
      char volts[16];
      std::snprintf(volts, sizeof volts, "%.2f", 3.4 + 0.05 * (rng.uniform() - 0.5));
      o << "Station " << st << ": logger read out, battery " << volts << " V, probe at " << depth << " cm.";
      if ((day + s) % 3 == 0) o << " Cable chewed near the junction box; spliced and taped.";
      if ((day * s) % 5 == 1) o << " Standing water in the pit, pumped out before reading.";
      o << "\n";
    }
    o << "\nTo do: re-level the staff at station " << static_cast<char>('A' + day % 6)
      << ", photograph the new cairn, back up the logger exports twice.\n";
    char name[64];
    std::snprintf(name, sizeof name, "survey/notes/day-%02d.txt", day);
    m.push_back({name, bytes_of(o.str())});
  }

  for (int s = 0; s < 6; ++s) {
    std::ostringstream o;
    o << "timestamp_utc,temp_10cm_c,temp_30cm_c,moisture_vol_pct,battery_v\n";
    const double base = 4.0 + 1.5 * s;
    for (int i = 0; i < 12 * 48; ++i) {  // twelve days, half-hourly
      const double hour = (i % 48) * 0.5;
      const double diurnal = std::sin((hour - 9.0) / 24.0 * 2 * std::numbers::pi);
      char line[160];
      std::snprintf(line, sizeof line, "2026-04-%02dT%02d:%02d:00Z,%.2f,%.2f,%.1f,%.3f\n", 6 + i / 48,
                    static_cast<int>(hour), (i % 2) * 30, base + 3.0 * diurnal + 0.2 * rng.gaussian(),
                    base + 0.8 * diurnal + 0.05 * rng.gaussian(), 28.0 + 4.0 * s - 0.01 * i + 0.3 * rng.gaussian(),
                    3.45 - 0.0004 * i);
      o << line;
    }
    char name[64];
    std::snprintf(name, sizeof name, "survey/loggers/station-%c.csv", 'a' + s);
    m.push_back({name, bytes_of(o.str())});
  }

  {
    // A 256 x 192 greyscale sketch: contour-like rings around two hills, six station marks.
    const int w = 256, h = 192;
    std::string header = "P5\n# station layout sketch\n" + std::to_string(w) + " " + std::to_string(h) + "\n255\n";
    std::vector<uint8_t> pgm(header.begin(), header.end());
    for (int y = 0; y < h; ++y) {
      for (int x = 0; x < w; ++x) {
        const double h1 = std::exp(-((x - 80.0) * (x - 80.0) + (y - 70.0) * (y - 70.0)) / 2400.0);
        const double h2 = 0.7 * std::exp(-((x - 190.0) * (x - 190.0) + (y - 120.0) * (y - 120.0)) / 1600.0);
        const double e = h1 + h2;
        const double ring = std::abs(std::sin(e * 18.0));
        int v = static_cast<int>(235 - 120 * e);
        if (ring < 0.08) v = 60;
        v += static_cast<int>(4 * (rng.uniform() - 0.5));
        pgm.push_back(static_cast<uint8_t>(std::clamp(v, 0, 255)));
      }
    }
    const int marks[6][2] = {{60, 40}, {110, 100}, {180, 80}, {200, 150}, {30, 160}, {235, 30}};
    for (auto& mk : marks)
      for (int dy = -2; dy <= 2; ++dy)
        for (int dx = -2; dx <= 2; ++dx)
          pgm[header.size() + (mk[1] + dy) * w + (mk[0] + dx)] = 0;
    m.push_back({"survey/sketch.pgm", pgm});
  }
  return m;
}

}  // namespace salvor::synth
