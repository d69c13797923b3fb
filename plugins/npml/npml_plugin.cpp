// npml: noise-predictive maximum-likelihood detection. A linear predictor of the
// equalized noise (Yule-Walker / Levinson-Durbin, trained with train()) is embedded in the
// branch metrics, using each survivor's own past decisions. Coker, Eleftheriou,
// Galbraith & Hirt, IEEE Trans. Magn. 34(1):110-117, 1998. Untrained, it behaves as the
// plain Viterbi detector, or (adapt = 1) estimates the predictor from its own decisions.
#include "detect/salvor_detector.h"
#include "trellis/plugin_glue.hpp"
#include "trellis/sequence_detector.hpp"

namespace {

using salvor::trellis::SequenceDetector;

const salvor_param_desc kParams[] = {
    {"predictor_order", SALVOR_PARAM_INT, 2, 1, 4, nullptr, "taps",
     "order of the noise prediction filter"},
    {"traceback_depth", SALVOR_PARAM_INT, 64, 8, SequenceDetector::kMaxTraceback, nullptr, "bits",
     "survivor traceback depth: every released bit has at least this many steps of trellis after it"},
    {"reliability", SALVOR_PARAM_BOOL, 1, 0, 1, nullptr, "",
     "compute per-bit reliabilities along competing paths (soft-output Viterbi)"},
    {"reliability_window", SALVOR_PARAM_INT, 32, 1, SequenceDetector::kMaxTraceback, nullptr,
     "bits", "how far back a merge may lower reliabilities (at most traceback_depth)"},
    {"adapt", SALVOR_PARAM_BOOL, 0, 0, 1, nullptr, "",
     "without training, estimate the predictor from the detector's own decisions"},
};

struct Traits {
  using Engine = SequenceDetector;
  static const char* name() { return "npml"; }
  static const salvor_param_desc* params() { return kParams; }
  static size_t param_count() { return sizeof(kParams) / sizeof(kParams[0]); }
  static Engine make(std::span<const double> target, double sigma, const std::vector<double>& v) {
    salvor::trellis::SequenceDetectorConfig c;
    c.kind = salvor::trellis::MetricKind::noise_predictive;
    c.predictor_order = static_cast<int>(v[0]);
    c.traceback_depth = static_cast<int>(v[1]);
    c.reliability = v[2] != 0.0;
    c.reliability_window = static_cast<int>(v[3]);
    c.adapt = v[4] != 0.0;
    c.noise_sigma = sigma;
    return Engine(target, c);
  }
};
using G = salvor::trellis::plugin::Glue<Traits>;

const salvor_detector_api kApi = {
    SALVOR_DETECTOR_ABI_VERSION,
    sizeof(salvor_detector_api),
    "npml",
    "1.0.0",
    "noise-predictive Viterbi: per-survivor linear noise prediction inside the branch metrics",
    "PR4",
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
