#pragma once
// PW50 and SNR from the known bits around sync marks (end of the 2T preamble and the sync
// mark), sampled twice per bit by the timing loop.
//
// Model: y(x) = A_w * sum_j s_j h(x - j - delta), h(t) = 1/(1 + (2t/PW50)^2) the Lorentzian
// isolated-transition response (Bertram 1994; Bergmans 1996), s_j the known transitions,
// one amplitude A_w per window (the AGC may move), one timing offset delta common to all
// windows (the loop's static phase), PW50 common; h as seen through the loop's cubic
// interpolator (see fit_channel()). Least squares: A_w in closed form,
// PW50 and delta by golden-section search (J. Kiefer, Proc. AMS 4(3):502-506, 1953),
// alternated twice.
//
// SNR, defined as the simulator and the project define it: 20 log10(A / sigma_n), A the
// isolated-transition peak, sigma_n the rms noise in the channel-bit Nyquist band
// |f| < 1/(2T). The residual of the fit (two samples per bit) is low-pass filtered at
// 1/(2T) (31-tap Hamming-windowed sinc, cut-off 1/4 of the 2/T rate) and its mean square
// taken as sigma_n^2; A^2 is the mean of A_w^2. Media noise (jitter) counts as noise here.

#include <cstddef>
#include <vector>

#include "analysis/sync_search.hpp"

namespace salvor::analysis {

struct ChannelFitResult {
  bool valid = false;          // false: no windows
  size_t windows = 0;
  double pw50_bits = 0;
  double timing_offset_bits = 0;  // delta
  double amplitude = 0;        // rms of the per-window amplitudes
  double noise_rms = 0;        // in |f| < 1/(2T)
  double snr_db = 0;
};

// `transitions` / `first_bit`: SyncSearch::known_transitions() / known_first_bit().
// `input_samples_per_bit`: the timing loop's input rate; the model then includes the
// loop's cubic interpolation from that grid, averaged over the (uniformly distributed,
// since the grid is asynchronous to the bits) fractional phase, which otherwise widens
// the apparent PW50 by a few percent at 2 samples per bit. 0 = no interpolator.
ChannelFitResult fit_channel(const std::vector<FitWindow>& windows, const std::vector<int>& transitions,
                             int first_bit, double input_samples_per_bit = 0);

}  // namespace salvor::analysis
