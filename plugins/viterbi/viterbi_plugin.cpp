// viterbi: maximum-likelihood sequence detection over the trellis of any target up to
// memory 5 (32 states), Euclidean branch metrics, block traceback, SOVA reliabilities;
// at 8 and 16 states, overlapping segments decoded two at a time.
// Forney, "The Viterbi algorithm", Proc. IEEE 61(3):268-278, 1973; Hagenauer & Hoeher,
// GLOBECOM 1989. The algorithm lives in plugins/trellis_lib (SequenceDetector).
#include "detect/salvor_detector.h"
#include "trellis/plugin_glue.hpp"
#include "trellis/sequence_detector.hpp"

namespace {

using salvor::trellis::SequenceDetector;

const salvor_param_desc kParams[] = {
    {"traceback_depth", SALVOR_PARAM_INT, 64, 8, SequenceDetector::kMaxTraceback, nullptr, "bits",
     "survivor traceback depth: every released bit has at least this many steps of trellis after it"},
    {"reliability", SALVOR_PARAM_BOOL, 1, 0, 1, nullptr, "",
     "compute per-bit reliabilities along competing paths (soft-output Viterbi)"},
    {"reliability_window", SALVOR_PARAM_INT, 32, 1, SequenceDetector::kMaxTraceback, nullptr,
     "bits", "how far back a merge may lower reliabilities (at most traceback_depth)"},
    {"segments", SALVOR_PARAM_BOOL, 1, 0, 1, nullptr, "",
     "8 and 16 states: decode the stream in overlapping segments, two at a time (faster); "
     "false: one trellis over the whole stream"},
};

struct Traits {
  using Engine = SequenceDetector;
  static const char* name() { return "viterbi"; }
  static const salvor_param_desc* params() { return kParams; }
  static size_t param_count() { return sizeof(kParams) / sizeof(kParams[0]); }
  static Engine make(std::span<const double> target, double sigma, const std::vector<double>& v) {
    salvor::trellis::SequenceDetectorConfig c;
    c.kind = salvor::trellis::MetricKind::euclidean;
    c.traceback_depth = static_cast<int>(v[0]);
    c.reliability = v[1] != 0.0;
    c.reliability_window = static_cast<int>(v[2]);
    c.parallel_segments = v[3] != 0.0;
    c.noise_sigma = sigma;
    return Engine(target, c);
  }
};
using G = salvor::trellis::plugin::Glue<Traits>;

const salvor_detector_api kApi = {
    SALVOR_DETECTOR_ABI_VERSION,
    sizeof(salvor_detector_api),
    "viterbi",
    "1.1.0",  // 1.1: segments (the default) can change bits where survivors merge late
    "Viterbi sequence detector for any target up to 32 states, with soft-output (SOVA) reliabilities",
    "EPR4",
    0,  // reliabilities are SOVA estimates, not calibrated LLRs
    SequenceDetector::kMaxHeldBack,
    kParams,
    sizeof(kParams) / sizeof(kParams[0]),
    &G::create,
    nullptr,
    &G::process,
    &G::flush,
    &G::reset,
    &G::destroy,
};

}  // namespace

extern "C" SALVOR_DETECTOR_EXPORT const salvor_detector_api* salvor_detector_entry(void) {
  return &kApi;
}
