#pragma once
// Optional helpers for detector plugins written in C++ (header-only, nothing to link).
// A plugin needs only salvor_detector.h; these spare the boilerplate of the boundary:
// writing the message buffer, reading a parameter value, and making sure no C++
// exception ever leaves a plugin function.

#include <cstdarg>
#include <cstdio>
#include <cstring>
#include <exception>
#include <new>

#include "detect/salvor_detector.h"

namespace salvor::plugin {

// printf-style message into the host's buffer (always NUL-terminated, truncated).
inline void set_error(char* err, size_t err_len, const char* format, ...) {
  if (!err || err_len == 0) return;
  va_list args;
  va_start(args, format);
  std::vsnprintf(err, err_len, format, args);
  va_end(args);
}

// The value the host passed for `key`, or `fallback` (the host fills every declared key).
inline double param_value(const salvor_detector_config* config, const char* key, double fallback) {
  for (size_t i = 0; i < config->param_count; ++i) {
    if (config->params[i].key && std::strcmp(config->params[i].key, key) == 0) return config->params[i].value;
  }
  return fallback;
}

// Runs `body` (returning a status); turns any exception into a status and a message.
template <class Body>
int guarded(char* err, size_t err_len, Body&& body) noexcept {
  try {
    return body();
  } catch (const std::bad_alloc&) {
    set_error(err, err_len, "out of memory");
    return SALVOR_E_NOMEM;
  } catch (const std::exception& e) {
    set_error(err, err_len, "%s", e.what());
    return SALVOR_E_INTERNAL;
  } catch (...) {
    set_error(err, err_len, "unknown exception");
    return SALVOR_E_INTERNAL;
  }
}

// A reliability for bits whose samples were flagged as erased: about zero, with the sign
// of the hard decision so that "llr sign agrees with the bit" still holds.
inline float erased_llr(bool bit) { return bit ? 1e-6f : -1e-6f; }

}  // namespace salvor::plugin
