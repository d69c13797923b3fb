// Noise-predictive (NPML) and pattern-dependent (PDNP) detectors against plain Viterbi
// on a Lorentzian channel equalized to PR4 by a fixed least-squares FIR:
//  - coloured noise: white noise added before the equalizer becomes coloured at the
//    detector (Coker, Eleftheriou, Galbraith & Hirt, IEEE Trans. Magn. 34(1), 1998:
//    NPML gains over PRML for 0.5 < PW50/T < 3.5);
//  - data-dependent noise: transition jitter (Moon, IEEE Trans. Magn. 27(6), 1991 model;
//    Kavcic & Moura, IEEE Trans. IT 46(1), 2000 and Moon & Park, IEEE JSAC 19(4), 2001:
//    pattern-dependent prediction helps in signal-dependent noise).
// Gains are measured as the SNR (or jitter) difference at a fixed BER of 1e-3, found by
// interpolating log10(BER) between grid points 1 dB apart. Sizes are chosen for a run of
// a few seconds; the asserted margins are well inside the measured gains (printed).
#include <gtest/gtest.h>

#include <cmath>
#include <functional>
#include <random>

#include "channel_sim.hpp"
#include "run_detector.hpp"
#include "trellis/sequence_detector.hpp"

using namespace salvor::trellis;
using namespace trellis_test;

namespace {

const std::vector<double> kPR4 = {1, 0, -1};

struct Scenario {
  double density = 2.5;
  double jitter = 0.0;  // T
  double noise = 0.0;   // per sample
};

struct Rates {
  double viterbi, npml, pdnp;
};

// One operating point: train the equalizer and the noise models on a training block,
// then detect a test block with all three detectors (same data, same noise).
Rates run_point(const Scenario& sc, size_t n_test, uint64_t seed) {
  LorentzianChannel ch;
  ch.density = sc.density;
  ch.jitter_sigma = sc.jitter;
  ch.noise_sigma = sc.noise;
  std::mt19937_64 rng(seed);
  const Bits a_train = random_bits(30000, rng);
  const auto x_train = levels_from_nrzi(a_train);
  const auto r_train = ch.readback(x_train, rng);
  const Fir eq = best_ls_fir(r_train, pr_channel(x_train, kPR4), 21);
  const auto y_train = to_float(eq.apply(r_train));

  const Bits a = random_bits(n_test, rng);
  const auto y = to_float(eq.apply(ch.readback(levels_from_nrzi(a), rng)));

  auto ber = [&](SequenceDetectorConfig c) {
    c.reliability = false;
    SequenceDetector det(kPR4, c);
    if (c.kind != MetricKind::euclidean)
      det.train(std::span<const float>(y_train).subspan(64, 29000),
                std::span<const uint8_t>(a_train).subspan(64, 29000),
                levels_from_nrzi(a_train)[63] > 0 ? 1 : -1);
    const Decided d = run_detector(det, y, {}, 8192);
    return count_errors(a, d.bits, 64, 64).rate();
  };
  SequenceDetectorConfig v;
  SequenceDetectorConfig np;
  np.kind = MetricKind::noise_predictive;
  np.predictor_order = 3;
  SequenceDetectorConfig pd;
  pd.kind = MetricKind::pattern_dependent;
  pd.pattern_bits = 3;
  pd.predictor_order = 2;
  return {ber(v), ber(np), ber(pd)};
}

// The abscissa (dB) at which log10(BER) crosses log10(target), by linear interpolation
// on a grid ordered from high BER to low BER. NaN if it never crosses.
double crossing(const std::vector<double>& db, const std::vector<double>& ber, double target) {
  for (size_t i = 1; i < db.size(); ++i)
    if (ber[i - 1] >= target && ber[i] < target) {
      const double l0 = std::log10(std::max(ber[i - 1], 1e-9)), l1 = std::log10(std::max(ber[i], 1e-9));
      const double t = (std::log10(target) - l0) / (l1 - l0);
      return db[i - 1] + t * (db[i] - db[i - 1]);
    }
  return NAN;
}

struct Crossings {
  double viterbi, npml, pdnp;
};

Crossings sweep(const std::vector<double>& db, const std::function<Scenario(double)>& at,
                size_t n_test, const char* label) {
  std::vector<double> v, n, p;
  for (size_t i = 0; i < db.size(); ++i) {
    const Rates r = run_point(at(db[i]), n_test, 1000 + i);
    std::printf("  %s %5.1f dB: BER viterbi %.2e  npml %.2e  pdnp %.2e\n", label, db[i], r.viterbi,
                r.npml, r.pdnp);
    v.push_back(r.viterbi);
    n.push_back(r.npml);
    p.push_back(r.pdnp);
  }
  Crossings c{crossing(db, v, 1e-3), crossing(db, n, 1e-3), crossing(db, p, 1e-3)};
  std::printf("  %s at BER 1e-3: viterbi %.2f dB, npml %.2f dB, pdnp %.2f dB\n", label, c.viterbi,
              c.npml, c.pdnp);
  return c;
}

}  // namespace

// White noise before a PR4 equalizer at PW50/T = 2.5: SNR = 20 log10(transition peak /
// noise rms per bit-spaced sample).
TEST(TrellisNoisePrediction, NpmlBeatsViterbiInColouredNoise) {
  std::vector<double> db;
  for (double s = 18; s <= 23; s += 1) db.push_back(s);
  const Crossings c = sweep(db, [](double snr) {
    Scenario sc;
    sc.density = 2.5;
    sc.noise = std::pow(10.0, -snr / 20.0);
    return sc;
  }, 120000, "coloured SNR");
  ASSERT_TRUE(std::isfinite(c.viterbi) && std::isfinite(c.npml) && std::isfinite(c.pdnp));
  EXPECT_GE(c.viterbi - c.npml, 0.5);  // NPML needs at least 0.5 dB less SNR
  EXPECT_GE(c.viterbi - c.pdnp, 0.5);
}

// Transition jitter dominates (white noise 34 dB below the transition peak); the abscissa
// is the jitter "SNR" -20 log10(jitter rms / T).
TEST(TrellisNoisePrediction, PdnpBeatsViterbiAndMatchesNpmlInJitterNoise) {
  std::vector<double> db;
  for (double s = 13; s <= 20; s += 1) db.push_back(s);
  const Crossings c = sweep(db, [](double jsnr) {
    Scenario sc;
    sc.density = 2.0;
    sc.noise = std::pow(10.0, -34.0 / 20.0);
    sc.jitter = std::pow(10.0, -jsnr / 20.0);
    return sc;
  }, 120000, "jitter SNR");
  ASSERT_TRUE(std::isfinite(c.viterbi) && std::isfinite(c.npml) && std::isfinite(c.pdnp));
  EXPECT_GT(c.viterbi - c.pdnp, 0.3);
  EXPECT_GE(c.npml - c.pdnp, -0.2);
}

// Without training, adapt = 1 estimates the predictor (NPML) or the pattern models (PDNP)
// from the detector's own decisions (decision-directed, as LMS equalizers are after
// their training field; Coker et al. 1998 note that the predictor can be adapted). On
// the coloured-noise channel at 21 dB both must at least halve plain Viterbi's BER.
TEST(TrellisNoisePrediction, DecisionDirectedModelsAlsoGain) {
  LorentzianChannel ch;
  ch.density = 2.5;
  ch.noise_sigma = std::pow(10.0, -21.0 / 20.0);
  std::mt19937_64 rng(77);
  const Bits a_train = random_bits(30000, rng);
  const auto x_train = levels_from_nrzi(a_train);
  const Fir eq = best_ls_fir(ch.readback(x_train, rng), pr_channel(x_train, kPR4), 21);
  const Bits a = random_bits(150000, rng);
  const auto y = to_float(eq.apply(ch.readback(levels_from_nrzi(a), rng)));
  auto ber = [&](MetricKind kind) {
    SequenceDetectorConfig c;
    c.kind = kind;
    c.reliability = false;
    c.predictor_order = kind == MetricKind::noise_predictive ? 3 : 2;
    c.adapt = true;
    SequenceDetector det(kPR4, c);
    const Decided d = run_detector(det, y, {}, 8192);
    // Skip the first 20000 bits, where the model is still being learnt.
    return count_errors(a, d.bits, 20000, 64).rate();
  };
  const double v = ber(MetricKind::euclidean);
  const double n = ber(MetricKind::noise_predictive);
  const double p = ber(MetricKind::pattern_dependent);
  std::printf("  decision-directed at 21 dB: BER viterbi %.2e, npml %.2e, pdnp %.2e\n", v, n, p);
  EXPECT_LT(n, 0.5 * v);
  EXPECT_LT(p, 0.5 * v);
}
