#pragma once
// Feeds a whole block to a C++ trellis detector (SequenceDetector or MaxLogMap) in
// chunks, then flushes; returns every bit and LLR in order.
#include <algorithm>
#include <cstdint>
#include <span>
#include <stdexcept>
#include <vector>

namespace trellis_test {

struct Decided {
  std::vector<uint8_t> bits;
  std::vector<float> llr;
};

template <class Detector>
Decided run_detector(Detector& det, const std::vector<float>& y,
                     const std::vector<uint8_t>& erasure = {}, size_t chunk = 0) {
  if (chunk == 0) chunk = std::max<size_t>(y.size(), 1);
  Decided out;
  out.bits.resize(y.size() + det.max_held_back() + chunk);
  out.llr.resize(out.bits.size());
  size_t produced = 0;
  for (size_t pos = 0; pos < y.size();) {
    const size_t n = std::min(chunk, y.size() - pos);
    std::span<const uint8_t> er;
    if (!erasure.empty()) er = std::span<const uint8_t>(erasure).subspan(pos, n);
    auto p = det.process(std::span<const float>(y).subspan(pos, n), er,
                         std::span<uint8_t>(out.bits).subspan(produced),
                         std::span<float>(out.llr).subspan(produced));
    if (p.consumed != n) throw std::runtime_error("run_detector: detector did not consume a chunk");
    pos += n;
    produced += p.produced;
  }
  produced += det.flush(std::span<uint8_t>(out.bits).subspan(produced),
                        std::span<float>(out.llr).subspan(produced));
  out.bits.resize(produced);
  out.llr.resize(produced);
  return out;
}

}  // namespace trellis_test
