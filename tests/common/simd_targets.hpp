#pragma once
// Runs a test body once for every SIMD target Highway compiled in and this CPU supports
// (dispatch restricted to that one target), then restores the normal dispatch; the
// target's name goes into every failure message.
#include <gtest/gtest.h>

#include <hwy/targets.h>

namespace salvor::testing {

template <class Body>
void for_each_simd_target(Body&& body) {
  for (const int64_t target : hwy::SupportedAndGeneratedTargets()) {
    hwy::SetSupportedTargetsForTest(target);
    SCOPED_TRACE(hwy::TargetName(target));
    body();
  }
  hwy::SetSupportedTargetsForTest(0);
}

}  // namespace salvor::testing
