/* Test-only detector plugins for the host tests, one source built several times with a
 * FIXTURE_* definition (see CMakeLists.txt). Most are broken on purpose; "testgood" is a
 * correct sign slicer on the unequalized signal whose "misbehave" parameter makes it
 * break the output contract or fail, so the host's checks can be seen to work. */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>

#include "detect/salvor_detector.h"

typedef struct {
  int misbehave; /* 0 none, 1 bad bit value, 2 llr of the wrong sign, 3 fail with a message,
                    4 an infinite llr on the block's last bit */
} fixture_state;

static const salvor_param_desc fixture_params[] = {
    {"misbehave", SALVOR_PARAM_CHOICE, 0, 0, 4, "none|bad_bit|bad_sign|fail|non_finite", "", "how to break the contract"},
    {"count", SALVOR_PARAM_INT, 3, 1, 10, NULL, "bits", "an integer parameter"},
    {"gain", SALVOR_PARAM_REAL, 1.0, 0.5, 2.0, NULL, "", "a real parameter"},
    {"flag", SALVOR_PARAM_BOOL, 0, 0, 1, NULL, "", "a bool parameter"},
#if defined(FIXTURE_BAD_PARAM)
    {"broken", SALVOR_PARAM_REAL, 1.0, 5.0, 2.0, NULL, "", "min above max"},
#endif
};

static int fx_create(const salvor_detector_config* config, void** handle, char* err, size_t err_len) {
  fixture_state* s = (fixture_state*)calloc(1, sizeof *s);
  size_t i;
  if (!s) return SALVOR_E_NOMEM;
  for (i = 0; i < config->param_count; ++i) {
    if (config->params[i].key && config->params[i].key[0] == 'm') s->misbehave = (int)config->params[i].value;
  }
  *handle = s;
  (void)err;
  (void)err_len;
  return SALVOR_OK;
}

static int fx_process(void* handle, const salvor_detector_input* in, salvor_detector_output* out, char* err,
                      size_t err_len) {
  const fixture_state* s = (const fixture_state*)handle;
  size_t k;
  if (s->misbehave == 3) {
    snprintf(err, err_len, "asked to fail at block of %zu samples", in->count);
    return SALVOR_E_STATE;
  }
  for (k = 0; k < in->count; ++k) {
    out->bits[k] = in->samples[k] > 0.0f ? 1 : 0;
    out->llr[k] = in->samples[k];
  }
  if (in->count && s->misbehave == 1) out->bits[0] = 2;
  if (in->count && s->misbehave == 2) out->llr[0] = out->bits[0] ? -1.0f : 1.0f;
  if (in->count && s->misbehave == 4) out->llr[in->count - 1] = out->bits[in->count - 1] ? INFINITY : -INFINITY;
  out->produced = in->count;
  return SALVOR_OK;
}

static int fx_flush(void* handle, salvor_detector_output* out, char* err, size_t err_len) {
  (void)handle;
  (void)err;
  (void)err_len;
  out->produced = 0;
  return SALVOR_OK;
}

static void fx_reset(void* handle) { (void)handle; }
static void fx_destroy(void* handle) { free(handle); }

#if defined(FIXTURE_DUPLICATE)
#define FIXTURE_NAME "template"
#else
#define FIXTURE_NAME "testgood"
#endif

#if defined(FIXTURE_BAD_TARGET)
#define FIXTURE_TARGET "PR9"
#else
#define FIXTURE_TARGET "none"
#endif

static const salvor_detector_api fixture_api = {
#if defined(FIXTURE_BAD_VERSION)
    7u,
#else
    SALVOR_DETECTOR_ABI_VERSION,
#endif
#if defined(FIXTURE_SMALL_STRUCT)
    16u,
#else
    sizeof(salvor_detector_api),
#endif
    FIXTURE_NAME,
    "0.0.1",
    "host test fixture",
    FIXTURE_TARGET,
    0,
    0,
    fixture_params,
    sizeof fixture_params / sizeof fixture_params[0],
    fx_create,
    NULL,
#if defined(FIXTURE_MISSING_FN)
    NULL,
#else
    fx_process,
#endif
    fx_flush,
    fx_reset,
    fx_destroy,
};

#if defined(FIXTURE_NO_ENTRY)
/* A real shared library, but not a plugin: it exports something else. */
SALVOR_DETECTOR_EXPORT int fixture_unrelated_function(void) { return fixture_api.param_count > 0; }
#else
SALVOR_DETECTOR_EXPORT const salvor_detector_api* salvor_detector_entry(void) {
#if defined(FIXTURE_NULL_TABLE)
  return NULL;
#else
  return &fixture_api;
#endif
}
#endif
