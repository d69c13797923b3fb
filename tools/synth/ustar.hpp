#pragma once
// A deterministic POSIX ustar archive builder (IEEE Std 1003.1-2017, pax/ustar interchange
// format: 512-byte headers, octal fields, checksum over the header with the checksum field
// taken as spaces, two zero blocks at the end), and the invented files of the demo image.

#include <cstdint>
#include <string>
#include <vector>

namespace salvor::synth {

struct ArchiveMember {
  std::string name;           // path inside the archive, < 100 bytes, '/'-separated
  std::vector<uint8_t> data;
  unsigned mode = 0644;
};

// Fixed owner, group, and modification time make the archive depend on the members only.
struct UstarOptions {
  uint64_t mtime = 1773446400;  // 2026-03-14T00:00:00Z
  std::string owner = "field";
  std::string group = "field";
};

std::vector<uint8_t> build_ustar(const std::vector<ArchiveMember>& members, const UstarOptions& opt = {});

// The demo's invented content: notes from a fictional field survey team, CSV measurements and
// a small PGM (netpbm P5) picture, all generated from `seed`.
std::vector<ArchiveMember> demo_archive_members(uint64_t seed);

}  // namespace salvor::synth
