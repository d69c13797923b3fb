// pdnp: pattern-dependent noise prediction. Per local data pattern (the last
// pattern_length written levels of a branch) a predictor, a bias and a prediction-error
// variance, learned by train() (or from decisions, adapt = 1); branch metric
// ln s2(c) + (prediction error)^2 / s2(c). Kavcic & Moura, IEEE Trans. IT 46(1):291-301,
// 2000; Moon & Park, IEEE JSAC 19(4):730-743, 2001. Untrained: plain Viterbi metric.
#include "detect/salvor_detector.h"
#include "trellis/plugin_glue.hpp"
#include "trellis/sequence_detector.hpp"

namespace {

using salvor::trellis::SequenceDetector;

const salvor_param_desc kParams[] = {
    {"pattern_length", SALVOR_PARAM_INT, 3, 1, 6, nullptr, "bits",
     "written levels x_k..x_(k-P+1) that select the noise model (the trellis grows to 2^(P-1) "
     "states if the target has fewer)"},
    {"predictor_order", SALVOR_PARAM_INT, 2, 0, 4, nullptr, "taps",
     "order of each pattern's noise prediction filter"},
    {"traceback_depth", SALVOR_PARAM_INT, 64, 8, SequenceDetector::kMaxTraceback, nullptr, "bits",
     "survivor traceback depth: every released bit has at least this many steps of trellis after it"},
    {"reliability", SALVOR_PARAM_BOOL, 1, 0, 1, nullptr, "",
     "compute per-bit reliabilities along competing paths (soft-output Viterbi)"},
    {"reliability_window", SALVOR_PARAM_INT, 32, 1, SequenceDetector::kMaxTraceback, nullptr,
     "bits", "how far back a merge may lower reliabilities (at most traceback_depth)"},
    {"adapt", SALVOR_PARAM_BOOL, 0, 0, 1, nullptr, "",
     "without training, estimate the pattern models from the detector's own decisions"},
};

struct Traits {
  using Engine = SequenceDetector;
  static const char* name() { return "pdnp"; }
  static const salvor_param_desc* params() { return kParams; }
  static size_t param_count() { return sizeof(kParams) / sizeof(kParams[0]); }
  static Engine make(std::span<const double> target, double sigma, const std::vector<double>& v) {
    salvor::trellis::SequenceDetectorConfig c;
    c.kind = salvor::trellis::MetricKind::pattern_dependent;
    c.pattern_bits = static_cast<int>(v[0]);
    c.predictor_order = static_cast<int>(v[1]);
    c.traceback_depth = static_cast<int>(v[2]);
    c.reliability = v[3] != 0.0;
    c.reliability_window = static_cast<int>(v[4]);
    c.adapt = v[5] != 0.0;
    c.noise_sigma = sigma;
    return Engine(target, c);
  }
};
using G = salvor::trellis::plugin::Glue<Traits>;

const salvor_detector_api kApi = {
    SALVOR_DETECTOR_ABI_VERSION,
    sizeof(salvor_detector_api),
    "pdnp",
    "1.0.0",
    "pattern-dependent noise-predictive Viterbi: per-pattern predictor, bias and variance",
    "EPR4",
    0,
    2 * SequenceDetector::kMaxTraceback - 1,
    kParams,
    sizeof(kParams) / sizeof(kParams[0]),
    &G::create,
    &G::train,
    &G::process,
    &G::flush,
    &G::reset,
    &G::destroy,
};

}  // namespace

extern "C" SALVOR_DETECTOR_EXPORT const salvor_detector_api* salvor_detector_entry(void) {
  return &kApi;
}
