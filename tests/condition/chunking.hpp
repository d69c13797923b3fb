#pragma once
// Feeds a flag-carrying stage in chunks and flushes it: the chunking-invariance harness
// (DEVELOPERS.md: chunks of 1, 7, 4096 and the whole give identical output).
#include <algorithm>
#include <cstdint>
#include <span>
#include <vector>

#include "common/stream.hpp"

namespace salvor::testing {

struct Flagged {
  std::vector<float> x;
  std::vector<uint8_t> f;
  bool operator==(const Flagged&) const = default;
};

template <class Stage>
concept HasFlush = requires(Stage s, std::span<float> o, std::span<uint8_t> f) { s.flush(o, f); };

template <class Stage>
Flagged run_stage(Stage& stage, std::span<const float> in, size_t chunk, std::span<const uint8_t> in_flags = {}) {
  std::vector<uint8_t> zeros;
  if (in_flags.empty()) {
    zeros.assign(in.size(), 0);
    in_flags = zeros;
  }
  Flagged r;
  std::vector<float> ox(std::max<size_t>(chunk, 1) + 65536);
  std::vector<uint8_t> of(ox.size());
  for (size_t pos = 0; pos < in.size();) {
    const size_t n = std::min(chunk, in.size() - pos);
    const auto p = stage.process(in.subspan(pos, n), in_flags.subspan(pos, n), std::span<float>(ox.data(), n),
                                 std::span<uint8_t>(of.data(), n));
    r.x.insert(r.x.end(), ox.begin(), ox.begin() + static_cast<ptrdiff_t>(p.produced));
    r.f.insert(r.f.end(), of.begin(), of.begin() + static_cast<ptrdiff_t>(p.produced));
    pos += p.consumed;
  }
  if constexpr (HasFlush<Stage>) {
    for (;;) {
      const auto p = stage.flush(ox, of);
      if (p.produced == 0) break;
      r.x.insert(r.x.end(), ox.begin(), ox.begin() + static_cast<ptrdiff_t>(p.produced));
      r.f.insert(r.f.end(), of.begin(), of.begin() + static_cast<ptrdiff_t>(p.produced));
    }
  }
  return r;
}

// Spans of one kind in a flag vector.
inline std::vector<std::pair<size_t, size_t>> spans_of(const std::vector<uint8_t>& f, uint8_t kind) {
  std::vector<std::pair<size_t, size_t>> s;
  for (size_t i = 0; i < f.size(); ++i) {
    if (!(f[i] & kind)) continue;
    size_t j = i;
    while (j < f.size() && (f[j] & kind)) ++j;
    s.emplace_back(i, j);
    i = j;
  }
  return s;
}

}  // namespace salvor::testing
