#pragma once
// SIMD kernels against the scalar reference (resampler.hpp, "Kernels"), on every Highway
// target this build compiled and this CPU runs. Targets with fused multiply-add (AVX2,
// AVX-512) must reproduce the reference bit for bit. Targets without it (SSE4, SSSE3,
// emulated) round each product separately. Both sides are then float dot products of
// n = taps terms (plus one rounding per interpolated coefficient), each within
// gamma_n sum|c_j x_j|, gamma_n ~ n 2^-24, of the exact value (Higham, Accuracy and
// Stability of Numerical Algorithms, 2nd ed. 2002, section 3.1), so they differ by at
// most 2 (2 taps + 4) 2^-24 sum|c_j| max|x|, with sum|c_j| < 4 for a windowed sinc of up
// to a few hundred taps (its magnitudes fall as 1/j: about (2/pi) ln(taps) + 1).

#include <gtest/gtest.h>
#include <hwy/targets.h>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <span>
#include <string>
#include <vector>

#include "resample/resampler.hpp"

namespace salvor::testing {

// Streams `in` through the resampler in chunks of `chunk`, flushing at the end.
inline std::vector<float> stream_through(const ResamplerConfig& c, std::span<const float> in, size_t chunk) {
  Resampler r(c);
  std::vector<float> out, buf(4096);
  size_t pos = 0;
  while (pos < in.size()) {
    const auto p = r.process(in.subspan(pos, std::min(chunk, in.size() - pos)), buf);
    out.insert(out.end(), buf.begin(), buf.begin() + static_cast<ptrdiff_t>(p.produced));
    pos += p.consumed;
  }
  for (;;) {
    const auto p = r.flush(buf);
    out.insert(out.end(), buf.begin(), buf.begin() + static_cast<ptrdiff_t>(p.produced));
    if (p.produced == 0) break;
  }
  return out;
}

inline bool target_has_fma(int64_t target) {
  return (target & (HWY_AVX2 | HWY_AVX3 | HWY_AVX3_DL)) != 0;
}

// Returns the number of targets compared.
inline size_t expect_kernels_match_reference(ResamplerConfig c, std::span<const float> in, const std::string& what) {
  c.scalar_reference = true;
  const auto ref = stream_through(c, in, 4096);
  c.scalar_reference = false;
  float max_in = 0.0f;
  for (float v : in) max_in = std::max(max_in, std::abs(v));
  const double tolerance = 2.0 * (2.0 * Resampler(c).spec().taps + 4.0) * std::ldexp(1.0, -24) * 4.0 * max_in;
  size_t compared = 0;
  for (const int64_t target : hwy::SupportedAndGeneratedTargets()) {
    hwy::SetSupportedTargetsForTest(target);
    const auto simd = stream_through(c, in, 3001);
    hwy::SetSupportedTargetsForTest(0);
    ++compared;
    const std::string name = what + " on " + hwy::TargetName(target);
    EXPECT_EQ(simd.size(), ref.size()) << name;
    if (simd.size() != ref.size()) continue;
    if (target_has_fma(target)) {
      size_t differ = 0;
      for (size_t i = 0; i < ref.size(); ++i) differ += simd[i] != ref[i];
      EXPECT_EQ(differ, 0u) << name << ": outputs not bit-identical to the scalar reference";
      ::testing::Test::RecordProperty(name, "bit-identical outputs: " + std::to_string(ref.size() - differ));
    } else {
      double worst = 0.0;
      for (size_t i = 0; i < ref.size(); ++i) worst = std::max(worst, std::abs(double{simd[i]} - ref[i]));
      EXPECT_LE(worst, tolerance) << name;
      char text[48];
      std::snprintf(text, sizeof text, "largest difference %.3g", worst);
      ::testing::Test::RecordProperty(name, text);
    }
  }
  return compared;
}

}  // namespace salvor::testing
