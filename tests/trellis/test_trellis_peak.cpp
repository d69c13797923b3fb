// Peak detection against Viterbi (EPR4) on a Lorentzian channel at a fixed SNR: the
// highest channel density PW50/T at which each still reaches BER 1e-4, from a coarse
// sweep of density. Peak detection (peak.so, unequalized samples) "barely works at
// PW50/T ratios above 1" (Taratorin, Characterization of Magnetic Recording Systems,
// 2004, ch. 9, via references §1); Viterbi EPR4 runs on samples equalized by a
// least-squares FIR designed here (viterbi.so). Both plugins are driven through the C
// interface. The trade's rule of thumb is that PRML fits up to about 40 % more data than
// peak detection (common practice, no source): printed, not asserted. Asserted: Viterbi's
// density is higher.
#include <gtest/gtest.h>

#include <cmath>
#include <filesystem>
#include <functional>
#include <random>

#include "channel_sim.hpp"
#include "plugin_instance.hpp"

using namespace trellis_test;

namespace {

const std::vector<double> kEPR4 = {1, 1, -1, -1};
// Transition peak 1 over rms noise per bit-spaced sample (SNR 20 log10(1/sigma)).
constexpr double kSnrDb = 24.0;
constexpr size_t kBits = 200000;  // 20 errors expected at BER 1e-4

double ber_at(const salvor_detector_api* peak, const salvor_detector_api* vit, double density,
              bool use_viterbi, uint64_t seed) {
  LorentzianChannel ch;
  ch.density = density;
  ch.noise_sigma = std::pow(10.0, -kSnrDb / 20.0);
  std::mt19937_64 rng(seed);
  const Bits a = random_bits(kBits, rng);
  const auto r = ch.readback(levels_from_nrzi(a), rng);
  std::vector<uint8_t> bits;
  std::vector<float> llr;
  if (!use_viterbi) {
    Instance inst(peak, {}, {});
    EXPECT_EQ(inst.status, SALVOR_OK) << inst.err;
    inst.run(to_float(r), {}, 8192, &bits, &llr);
  } else {
    const Bits at = random_bits(20000, rng);
    const auto xt = levels_from_nrzi(at);
    const Fir eq = best_ls_fir(ch.readback(xt, rng), pr_channel(xt, kEPR4), 21);
    Instance inst(vit, {{"reliability", 0}}, kEPR4);
    EXPECT_EQ(inst.status, SALVOR_OK) << inst.err;
    inst.run(to_float(eq.apply(r)), {}, 8192, &bits, &llr);
  }
  if (bits.size() != a.size()) return 1.0;
  return count_errors(a, bits, 64, 64).rate();
}

// Highest density on the grid before the BER first exceeds the target.
double highest_density(const std::vector<double>& grid, const std::function<double(double)>& ber,
                       const char* name) {
  double best = NAN;
  for (double d : grid) {
    const double b = ber(d);
    std::printf("  %-8s PW50/T %.2f: BER %.2e\n", name, d, b);
    if (b > 1e-4) break;
    best = d;
  }
  return best;
}

}  // namespace

TEST(TrellisPeakVersusViterbi, ViterbiEpr4ReachesAHigherDensity) {
  const std::string peak_path = std::string(SALVOR_PLUGIN_BUILD_DIR) + "/peak.so";
  if (!std::filesystem::exists(peak_path)) GTEST_SKIP() << "peak.so is not built: " << peak_path;
  Plugin peak("peak"), vit("viterbi");
  ASSERT_NE(peak.api, nullptr) << dlerror();
  ASSERT_NE(vit.api, nullptr) << dlerror();
  std::vector<double> peak_grid, vit_grid;
  for (double d = 0.5; d < 3.01; d += 0.1) peak_grid.push_back(d);
  for (double d = 2.0; d < 4.01; d += 0.1) vit_grid.push_back(d);
  const double d_peak = highest_density(peak_grid, [&](double d) {
    return ber_at(peak.api, vit.api, d, false, 500 + static_cast<uint64_t>(d * 100));
  }, "peak");
  const double d_vit = highest_density(vit_grid, [&](double d) {
    return ber_at(peak.api, vit.api, d, true, 500 + static_cast<uint64_t>(d * 100));
  }, "viterbi");
  std::printf("  SNR %.0f dB, BER 1e-4: peak up to PW50/T %.2f, Viterbi EPR4 up to %.2f: "
              "%+.0f %% density (rule of thumb ~40 %%, common practice, no source)\n",
              kSnrDb, d_peak, d_vit, 100.0 * (d_vit / d_peak - 1.0));
  RecordProperty("peak_density", std::to_string(d_peak));
  RecordProperty("viterbi_epr4_density", std::to_string(d_vit));
  ASSERT_TRUE(std::isfinite(d_peak)) << "peak detection never reached BER 1e-4";
  ASSERT_TRUE(std::isfinite(d_vit)) << "Viterbi never reached BER 1e-4";
  EXPECT_GT(d_vit, d_peak);
}
