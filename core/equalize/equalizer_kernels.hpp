#pragma once
// Hot loops of the adaptive equalizer (equalizer.hpp), written once with Google Highway and
// dispatched at run time to the best SIMD target. The plain scalar loops in equalizer.cpp
// stay as the reference (EqualizerConfig::reference_kernel); tests compare the two.
//
// Delay lines are linear ("doubled"): sample n sits at n % ring and at n % ring + ring, so
// every window of up to `ring` samples is contiguous and each output is one dot product
// with the taps stored in reverse (w_rev[k] = w[taps-1-k]), padded with zeros to `padded`.

#include <cstddef>
#include <cstdint>

namespace salvor::equalize::detail {

struct LmsKernelState {
  double* x = nullptr;       // doubled sample line, 2*ring + padding (non-finite stored as 0)
  uint8_t* bad = nullptr;    // doubled erased/non-finite/padding flags
  int8_t* level = nullptr;   // doubled known/decided levels, 0 = unknown
  size_t ring = 0;
  size_t next_slot = 0;      // n_in % ring
  double* w_rev = nullptr;   // reversed taps, `padded` entries, zero beyond `taps`
  const double* update_mask = nullptr;  // 1 where a tap adapts, 0 at padding / a fixed main tap
  const double* window_mask = nullptr;  // 1 for the `taps` window samples, 0 at padding
  size_t taps = 0, padded = 0, delay = 0;
  const double* target = nullptr;
  size_t target_len = 0;
  bool normalized = true;
  double step_size = 0.0;
  double mse_time_constant = 1.0;
  uint64_t n_in = 0, n_out = 0;
  uint64_t last_bad_plus1 = 0;  // 1 + index of the newest flagged sample, 0 = none in this span
  // Training computes outputs two updates ahead: the step sizes of the last two outputs'
  // updates (windows ending one and two samples back) not yet applied to w_rev.
  double pending_mu1 = 0.0, pending_mu2 = 0.0;
  double running_mse = 0.0;
  bool running_started = false;
  double span_sum = 0.0, total_sum = 0.0;
  size_t span_count = 0, total_count = 0;
};

// Padding of the tap vector: a multiple of the widest vector of doubles (8 lanes).
constexpr size_t kTapPadding = 8;

// Takes n samples (levels == nullptr: filter only, vectorised across outputs; else adapt
// on every clean sample with known levels, serial as LMS must be). Returns outputs written.
size_t run_span(LmsKernelState& s, const float* in, const int8_t* levels, const uint8_t* erasure, bool padding,
                float* out, size_t n);

// Applies the pending updates to w_rev (before anything that uses w_rev directly).
void fold_pending_updates(LmsKernelState& s);

// Decision-directed step for an output already produced (its level already stored).
void adapt_past(LmsKernelState& s, uint64_t j, bool allow_update);

}  // namespace salvor::equalize::detail
