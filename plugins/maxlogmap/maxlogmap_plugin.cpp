// maxlogmap: soft-output max-log-MAP (BCJR in the log domain with max) over the trellis
// of any target up to 32 states, in blocks with a backward warm-up overlap. Bahl, Cocke,
// Jelinek & Raviv, IEEE Trans. IT-20(2):284-287, 1974; Robertson, Villebrun & Hoeher,
// ICC 1995. The algorithm lives in plugins/trellis_lib (MaxLogMap).
#include "detect/salvor_detector.h"
#include "trellis/maxlogmap.hpp"
#include "trellis/plugin_glue.hpp"

namespace {

using salvor::trellis::MaxLogMap;

const salvor_param_desc kParams[] = {
    {"block_length", SALVOR_PARAM_INT, 256, 16, MaxLogMap::kMaxBlock, nullptr, "bits",
     "bits released per forward-backward block"},
    {"overlap", SALVOR_PARAM_INT, 64, 0, MaxLogMap::kMaxOverlap, nullptr, "bits",
     "backward warm-up beyond each block"},
};

struct Traits {
  using Engine = MaxLogMap;
  static const char* name() { return "maxlogmap"; }
  static const salvor_param_desc* params() { return kParams; }
  static size_t param_count() { return sizeof(kParams) / sizeof(kParams[0]); }
  static Engine make(std::span<const double> target, double sigma, const std::vector<double>& v) {
    salvor::trellis::MaxLogMapConfig c;
    c.block_length = static_cast<int>(v[0]);
    c.overlap = static_cast<int>(v[1]);
    c.noise_sigma = sigma;
    return Engine(target, c);
  }
};
using G = salvor::trellis::plugin::Glue<Traits>;

const salvor_detector_api kApi = {
    SALVOR_DETECTOR_ABI_VERSION,
    sizeof(salvor_detector_api),
    "maxlogmap",
    "1.0.0",
    "soft-output max-log-MAP (forward-backward) detector for any target up to 32 states",
    "EPR4",
    1,
    MaxLogMap::kMaxBlock + MaxLogMap::kMaxOverlap - 1,
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
