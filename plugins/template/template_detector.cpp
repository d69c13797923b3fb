// template: the smallest complete salvor detector, and the example for plugin authors.
//
// A threshold slicer for the dicode target 1 - D (f = [f0, -f0]): with written levels
// a_k = +-1 the noiseless equalized sample is y_k = f0 (a_k - a_{k-1}), which is 0 without
// a transition and +-2 f0 with one. So the NRZI bit is 1 when |y_k| > t * A, A = 2|f0|.
// The reliability is the log-likelihood ratio of the two Gaussian hypotheses |y| ~ A and
// y ~ 0 with noise sigma (Proakis, Digital Communications, ML detection in AWGN), shifted
// to the slicer threshold so that its sign always agrees with the bit:
//     llr = A (|y| - t A) / sigma^2      (t = 1/2 gives the plain two-hypothesis LLR)
// sigma is the host's estimate; without one it is taken as A/4 (an assumption, no source).
// Latency 0: every sample gives its bit at once. No training.
//
// It includes only the plugin interface header and handles every failure as a status.

#include <cmath>
#include <cstdio>
#include <cstring>
#include <new>

#include "detect/salvor_detector.h"

namespace {

struct Slicer {
  double amplitude;  // A = 2 |f0|: the noiseless |y| of a transition
  double threshold;  // t A
  double llr_scale;  // A / sigma^2
};

void set_error(char* err, size_t len, const char* text) {
  if (err && len) std::snprintf(err, len, "%s", text);
}

const salvor_param_desc kParams[] = {
    {"threshold", SALVOR_PARAM_REAL, 0.5, 0.1, 0.9, nullptr, "of 2|f0|",
     "a transition is decided when |y| exceeds this fraction of the transition level"},
};

int create(const salvor_detector_config* config, void** handle, char* err, size_t err_len) {
  *handle = nullptr;
  if (!config || config->struct_size < sizeof(salvor_detector_config)) {
    set_error(err, err_len, "configuration is missing or too small");
    return SALVOR_E_PARAM;
  }
  if (!config->target || config->target_len != 2 || config->target[0] == 0.0 ||
      config->target[1] != -config->target[0]) {
    set_error(err, err_len, "needs the dicode target 1 - D (two taps, f1 = -f0)");
    return SALVOR_E_PARAM;
  }
  double t = kParams[0].default_value;
  for (size_t i = 0; i < config->param_count; ++i) {
    if (config->params[i].key && std::strcmp(config->params[i].key, "threshold") == 0) t = config->params[i].value;
  }
  const double amplitude = 2.0 * std::fabs(config->target[0]);
  const double sigma = config->noise_sigma > 0.0 ? config->noise_sigma : amplitude / 4.0;
  auto* s = new (std::nothrow) Slicer{amplitude, t * amplitude, amplitude / (sigma * sigma)};
  if (!s) {
    set_error(err, err_len, "out of memory");
    return SALVOR_E_NOMEM;
  }
  *handle = s;
  return SALVOR_OK;
}

int process(void* handle, const salvor_detector_input* in, salvor_detector_output* out, char* err, size_t err_len) {
  const auto* s = static_cast<const Slicer*>(handle);
  if (!in || !out || (in->count && (!in->samples || !out->bits || !out->llr)) || out->capacity < in->count) {
    set_error(err, err_len, "input or output block is invalid or too small");
    return SALVOR_E_INPUT;
  }
  for (size_t k = 0; k < in->count; ++k) {
    const double magnitude = std::fabs(static_cast<double>(in->samples[k]));
    const bool finite = std::isfinite(magnitude);
    const bool transition = finite && magnitude > s->threshold;
    out->bits[k] = transition ? 1 : 0;
    if ((in->erasure && in->erasure[k]) || !finite) {
      out->llr[k] = transition ? 1e-6f : -1e-6f;  // erased or not a number: no confidence, sign kept
    } else {
      out->llr[k] = static_cast<float>(s->llr_scale * (magnitude - s->threshold));
    }
  }
  out->produced = in->count;
  return SALVOR_OK;
}

int flush(void*, salvor_detector_output* out, char*, size_t) {
  if (out) out->produced = 0;  // nothing is ever held back
  return SALVOR_OK;
}

void reset(void*) {}  // no state between samples

void destroy(void* handle) { delete static_cast<Slicer*>(handle); }

const salvor_detector_api kApi = {
    SALVOR_DETECTOR_ABI_VERSION,
    sizeof(salvor_detector_api),
    "template",
    "1.0.0",
    "threshold slicer for the dicode target 1 - D; the example detector for plugin authors",
    "dicode",
    0,  // soft_output: the llr is only as good as the noise estimate
    0,  // max_latency
    kParams,
    sizeof kParams / sizeof kParams[0],
    create,
    nullptr,  // train: not needed
    process,
    flush,
    reset,
    destroy,
};

}  // namespace

extern "C" SALVOR_DETECTOR_EXPORT const salvor_detector_api* salvor_detector_entry(void) { return &kApi; }
