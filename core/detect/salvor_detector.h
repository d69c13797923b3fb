/* salvor detector plugin interface, version 1.
 *
 * A detector plugin is a shared library with one exported C function,
 * salvor_detector_entry(), returning a pointer to a static, versioned table of plain C
 * functions. Nothing C++ crosses this boundary; a plugin may use C++ inside. This header
 * is the whole contract: a plugin author includes only this file.
 *
 * Data flow: the host feeds bit-spaced samples (equalized towards the plugin's target,
 * or unequalized for a detector whose target is "none") block by block; the plugin
 * returns channel bits in the NRZI domain (1 = a transition of the written level) and a
 * log-likelihood ratio per bit. Detectors may have latency (a sliding traceback): process()
 * returns what is decided so far and flush() the rest at the end of a span.
 *
 * Errors: functions return SALVOR_OK or a status code and write a message (NUL-terminated,
 * truncated to the buffer) into `err`. A plugin never prints, never exits, never throws
 * across the boundary.
 */
#ifndef SALVOR_DETECTOR_H
#define SALVOR_DETECTOR_H

#include <stddef.h>
#include <stdint.h>

#ifdef __cplusplus
extern "C" {
#endif

#define SALVOR_DETECTOR_ABI_VERSION 1u
#define SALVOR_MAX_TARGET_TAPS 6 /* memory 5: up to 32 trellis states */

#if defined(__GNUC__)
#define SALVOR_DETECTOR_EXPORT __attribute__((visibility("default")))
#else
#define SALVOR_DETECTOR_EXPORT
#endif

/* Status codes returned across the boundary. */
enum {
  SALVOR_OK = 0,
  SALVOR_E_PARAM = 1,    /* a parameter or the configuration is invalid */
  SALVOR_E_NOMEM = 2,    /* allocation failed */
  SALVOR_E_INPUT = 3,    /* the input block is invalid (NULL pointers, capacity too small) */
  SALVOR_E_STATE = 4,    /* called in the wrong order (e.g. process before train when required) */
  SALVOR_E_INTERNAL = 5
};

/* Parameter types. */
enum {
  SALVOR_PARAM_INT = 1,
  SALVOR_PARAM_REAL = 2,
  SALVOR_PARAM_BOOL = 3,
  SALVOR_PARAM_CHOICE = 4 /* value is the index into `choices` */
};

/* One self-describing parameter: one table drives validation, the listing and the run log. */
typedef struct salvor_param_desc {
  const char* key;         /* e.g. "traceback_depth" */
  int type;                /* SALVOR_PARAM_* */
  double default_value;
  double min_value;        /* inclusive; ignored for BOOL */
  double max_value;        /* inclusive; for CHOICE: number of choices - 1 */
  const char* choices;     /* CHOICE only: '|'-separated names, else NULL */
  const char* units;       /* e.g. "bits", or "" */
  const char* help;        /* one line */
} salvor_param_desc;

typedef struct salvor_param_value {
  const char* key;
  double value;
} salvor_param_value;

/* What the host tells a detector when creating it. */
typedef struct salvor_detector_config {
  uint32_t struct_size;                       /* sizeof(salvor_detector_config) */
  const double* target;                       /* target taps f0..f(L-1), f0 first; NULL for "none" */
  size_t target_len;                          /* 1..SALVOR_MAX_TARGET_TAPS, or 0 */
  double noise_sigma;                         /* rms noise at the detector input, <= 0 if unknown */
  const salvor_param_value* params;           /* values for keys the plugin declared; others default */
  size_t param_count;
} salvor_detector_config;

typedef struct salvor_detector_input {
  const float* samples;   /* bit-spaced samples */
  const uint8_t* erasure; /* NULL, or 1 where conditioning flagged the sample (thermal asperity, clip) */
  size_t count;
} salvor_detector_input;

typedef struct salvor_detector_output {
  uint8_t* bits;    /* capacity entries: channel bits 0/1 (NRZI domain) */
  float* llr;       /* capacity entries: log P(bit=1)/P(bit=0); sign agrees with bits;
                       |llr| is the reliability (hard detectors give their best estimate) */
  size_t capacity;  /* must be >= input count + the plugin's max latency (see below) */
  size_t produced;  /* set by the plugin */
} salvor_detector_output;

typedef struct salvor_detector_api {
  uint32_t abi_version;  /* SALVOR_DETECTOR_ABI_VERSION */
  uint32_t struct_size;  /* sizeof(salvor_detector_api) */
  const char* name;      /* unique, lowercase, e.g. "viterbi" */
  const char* version;   /* the plugin's own version, e.g. "1.0.0" */
  const char* description;
  const char* target;    /* target it wants from the equalizer: "PR4", "EPR4", "E2PR4",
                            "dicode" (1-D), "GPR" (a generalized MMSE target; "GPR3".."GPR5"
                            fix its length), "none" (unequalized); case-insensitive */
  int soft_output;       /* 1 if llr is a calibrated log-likelihood ratio */
  size_t max_latency;    /* bits a process() call may hold back */
  const salvor_param_desc* params;
  size_t param_count;

  /* Create an instance. On failure return a status and leave *handle NULL. */
  int (*create)(const salvor_detector_config* config, void** handle, char* err, size_t err_len);
  /* Optional (may be NULL): learn from samples whose channel bits are known (preamble,
     sync mark, training data). `levels_before` is the written level (+1/-1) before bit 0. */
  int (*train)(void* handle, const float* samples, const uint8_t* known_bits, size_t count,
               int levels_before, char* err, size_t err_len);
  /* Consume all `in->count` samples; write decided bits to `out`. */
  int (*process)(void* handle, const salvor_detector_input* in, salvor_detector_output* out,
                 char* err, size_t err_len);
  /* Emit every bit still held back; the next process() starts a new span. */
  int (*flush)(void* handle, salvor_detector_output* out, char* err, size_t err_len);
  /* Clear the state of the current span, keep settings and anything trained. */
  void (*reset)(void* handle);
  void (*destroy)(void* handle);
} salvor_detector_api;

/* The one entry point every plugin exports. */
typedef const salvor_detector_api* (*salvor_detector_entry_fn)(void);
#define SALVOR_DETECTOR_ENTRY_NAME "salvor_detector_entry"

#ifdef __cplusplus
}
#endif

#endif /* SALVOR_DETECTOR_H */
