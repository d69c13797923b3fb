#pragma once
// The C side of a trellis detector plugin (core/detect/salvor_detector.h), shared by the
// viterbi, npml, pdnp and maxlogmap plugins: parameter validation against the plugin's
// own table, the status/message convention, and exception containment (nothing throws
// across the boundary).
//
// A plugin supplies a Traits class:
//   using Engine = ...;   // SequenceDetector or MaxLogMap
//   static const salvor_param_desc* params();  static size_t param_count();
//   static Engine make(std::span<const double> target, double noise_sigma,
//                      const std::vector<double>& values /* in table order */);

#include <cmath>
#include <cstring>
#include <exception>
#include <new>
#include <span>
#include <string>
#include <vector>

#include "common/error.hpp"
#include "common/stream.hpp"
#include "detect/salvor_detector.h"

namespace salvor::trellis::plugin {

inline void write_message(char* err, size_t len, const std::string& msg) {
  if (!err || len == 0) return;
  const size_t n = std::min(len - 1, msg.size());
  std::memcpy(err, msg.data(), n);
  err[n] = '\0';
}

// Values for every entry of `table`, in table order: given ones validated, others default.
std::vector<double> parse_params(const char* plugin, const salvor_param_desc* table, size_t n,
                                 const salvor_detector_config* config);
// The target taps, validated (1..SALVOR_MAX_TARGET_TAPS finite values).
std::vector<double> target_of(const char* plugin, const salvor_detector_config* config);
// noise_sigma: finite; <= 0 means unknown.
double sigma_of(const char* plugin, const salvor_detector_config* config);

// Runs `f`, maps exceptions to status codes and a message.
template <class F>
int guarded(char* err, size_t len, F&& f) {
  try {
    f();
    return SALVOR_OK;
  } catch (const salvor::Error& e) {
    write_message(err, len, e.what());
    switch (e.kind()) {
      case ErrorKind::usage: return SALVOR_E_PARAM;
      case ErrorKind::input: return SALVOR_E_INPUT;
      default: return SALVOR_E_INTERNAL;
    }
  } catch (const std::bad_alloc&) {
    write_message(err, len, "out of memory");
    return SALVOR_E_NOMEM;
  } catch (const std::exception& e) {
    write_message(err, len, std::string("internal error: ") + e.what());
    return SALVOR_E_INTERNAL;
  } catch (...) {
    write_message(err, len, "internal error: unknown exception");
    return SALVOR_E_INTERNAL;
  }
}

template <class Traits>
struct Glue {
  using Engine = typename Traits::Engine;

  static int create(const salvor_detector_config* config, void** handle, char* err, size_t len) {
    if (handle) *handle = nullptr;
    return guarded(err, len, [&] {
      if (!handle) throw_usage(Traits::name(), "create: handle pointer is NULL");
      std::vector<double> values =
          parse_params(Traits::name(), Traits::params(), Traits::param_count(), config);
      std::vector<double> target = target_of(Traits::name(), config);
      const double sigma = sigma_of(Traits::name(), config);
      *handle = new Engine(Traits::make(target, sigma, values));
    });
  }

  static int train(void* handle, const float* samples, const uint8_t* known_bits, size_t count,
                   int levels_before, char* err, size_t len) {
    return guarded(err, len, [&] {
      if (!handle) throw_usage(Traits::name(), "train: handle is NULL");
      if (count && (!samples || !known_bits))
        throw_input(Traits::name(), "train: samples or known bits pointer is NULL");
      auto* e = static_cast<Engine*>(handle);
      e->train(std::span<const float>(samples, count),
               std::span<const uint8_t>(known_bits, count), levels_before);
    });
  }

  static int process(void* handle, const salvor_detector_input* in, salvor_detector_output* out,
                     char* err, size_t len) {
    if (out) out->produced = 0;
    return guarded(err, len, [&] {
      if (!handle || !in || !out) throw_input(Traits::name(), "process: NULL handle, input or output");
      auto* e = static_cast<Engine*>(handle);
      if (in->count && !in->samples) throw_input(Traits::name(), "process: samples pointer is NULL");
      const size_t need = in->count + e->held_back();
      if (out->capacity < need)
        throw_input(Traits::name(), "process: output capacity " + std::to_string(out->capacity) +
                                        " is less than " + std::to_string(need) +
                                        " (input count + bits held back)");
      if (out->capacity && (!out->bits || !out->llr))
        throw_input(Traits::name(), "process: output bits or llr pointer is NULL");
      std::span<const uint8_t> erasure;
      if (in->erasure) erasure = std::span<const uint8_t>(in->erasure, in->count);
      salvor::Progress p = e->process(std::span<const float>(in->samples, in->count), erasure,
                              std::span<uint8_t>(out->bits, out->capacity),
                              std::span<float>(out->llr, out->capacity));
      out->produced = p.produced;
      if (p.consumed != in->count) throw_internal("process stopped before the end of the input");
    });
  }

  static int flush(void* handle, salvor_detector_output* out, char* err, size_t len) {
    if (out) out->produced = 0;
    return guarded(err, len, [&] {
      if (!handle || !out) throw_input(Traits::name(), "flush: NULL handle or output");
      auto* e = static_cast<Engine*>(handle);
      if (out->capacity < e->held_back())
        throw_input(Traits::name(), "flush: output capacity " + std::to_string(out->capacity) +
                                        " is less than the " + std::to_string(e->held_back()) +
                                        " bits held back");
      if (out->capacity && (!out->bits || !out->llr))
        throw_input(Traits::name(), "flush: output bits or llr pointer is NULL");
      out->produced = e->flush(std::span<uint8_t>(out->bits, out->capacity),
                               std::span<float>(out->llr, out->capacity));
    });
  }

  static void reset(void* handle) {
    if (handle) static_cast<Engine*>(handle)->reset();
  }

  static void destroy(void* handle) { delete static_cast<Engine*>(handle); }
};

}  // namespace salvor::trellis::plugin
