#include <gtest/gtest.h>

#include <array>
#include <cmath>

#include "common/error.hpp"
#include "timing/farrow.hpp"
#include "timing/loop_gains.hpp"

using namespace salvor::timing;

// Check values: cubic Lagrange weights on nodes -1, 0, 1, 2 (Erup, Gardner & Harris, IEEE
// Trans. Commun. 41(6), 1993; values as in the project's read-channel-theory notes, §4,
// which derive them from the closed form): mu = 0.5 and mu = 0.25.
TEST(Farrow, LagrangeWeightCheckValues) {
  const auto w05 = cubic_lagrange_weights(0.5);
  const std::array<double, 4> e05 = {-0.0625, 0.5625, 0.5625, -0.0625};
  const auto w025 = cubic_lagrange_weights(0.25);
  const std::array<double, 4> e025 = {-0.0546875, 0.8203125, 0.2734375, -0.0390625};
  for (int i = 0; i < 4; ++i) {
    EXPECT_DOUBLE_EQ(w05[i], e05[i]) << i;
    EXPECT_DOUBLE_EQ(w025[i], e025[i]) << i;
  }
}

TEST(Farrow, FarrowFormEqualsLagrangeWeights) {
  for (double mu = 0.0; mu < 1.0; mu += 0.0625) {
    const std::array<double, 4> x = {0.3, -1.25, 2.0, 0.75};
    const auto w = cubic_lagrange_weights(mu);
    const double direct = w[0] * x[0] + w[1] * x[1] + w[2] * x[2] + w[3] * x[3];
    EXPECT_NEAR(farrow_cubic(x, mu), direct, 1e-14) << mu;
  }
  // mu = 0 returns x[m] exactly (interpolating condition).
  EXPECT_EQ(farrow_cubic({9, 4, -3, 7}, 0.0), 4.0);
}

// A cubic through four points is reproduced exactly by cubic Lagrange interpolation
// (uniqueness of the interpolating polynomial of degree <= 3).
TEST(Farrow, ReproducesAnyCubicExactly) {
  const double c0 = 0.7, c1 = -1.3, c2 = 0.45, c3 = 0.2;
  auto f = [&](double t) { return ((c3 * t + c2) * t + c1) * t + c0; };
  for (double m = -2; m <= 3; m += 1) {
    const std::array<double, 4> x = {f(m - 1), f(m), f(m + 1), f(m + 2)};
    for (double mu = 0.0; mu < 1.0; mu += 0.1) {
      EXPECT_NEAR(farrow_cubic(x, mu), f(m + mu), 1e-12) << m << " " << mu;
    }
  }
}

// Check values: Rice, "Digital Communications: A Discrete-Time Approach" (2009), app. C,
// with Kp K0 = 1; numbers from the project's read-channel-theory notes §4 table
// (BnT 0.01 / zeta 0.707, 0.01 / 1.0, 0.001 / 0.707).
TEST(LoopGains, RiceAppendixCCheckValues) {
  auto g = pi_loop_gains(0.01, 0.707);
  EXPECT_NEAR(g.proportional, 2.631087e-2, 5e-9);
  EXPECT_NEAR(g.integral, 3.508822e-4, 5e-11);
  g = pi_loop_gains(0.01, 1.0);
  EXPECT_NEAR(g.proportional, 3.149408e-2, 5e-9);
  EXPECT_NEAR(g.integral, 2.519526e-4, 5e-11);
  g = pi_loop_gains(0.001, 0.707);
  EXPECT_NEAR(g.proportional, 2.662846e-3, 5e-10);
  EXPECT_NEAR(g.integral, 3.551176e-6, 5e-13);
  // The detector gain divides both.
  const auto h = pi_loop_gains(0.01, 0.707, 2.0);
  EXPECT_NEAR(h.proportional, 2.631087e-2 / 2, 5e-9);
}

TEST(LoopGains, RejectsBadParameters) {
  EXPECT_THROW(pi_loop_gains(0.0, 0.7), salvor::Error);
  EXPECT_THROW(pi_loop_gains(0.3, 0.7), salvor::Error);
  EXPECT_THROW(pi_loop_gains(0.01, 0.0), salvor::Error);
  EXPECT_THROW(pi_loop_gains(0.01, 0.7, 0.0), salvor::Error);
}
