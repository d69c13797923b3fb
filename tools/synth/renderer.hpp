#pragma once
// The readback renderer: turns the channel bits of one written track into the samples of one
// capture (one revolution plus a lead before the index and a tail after it), chunk by chunk.
//
// Signal chain, in this order (each step documented where it is computed):
//  1. written track: a transition at every channel 1 (NRZI), alternating polarity; each
//     transition k has written-in media noise: position jitter Delta_k ~ N(0, sigma_j^2) bit
//     periods and width variation gamma_k ~ N(0, sigma_w^2) (relative to PW50 or T50), drawn
//     once per track so every revolution reads the same written noise
//     (Moon, "Discrete-time modeling of transition-noise-dominant channels and study of
//     detection performance", IEEE Trans. Magn. 27(6):4573-4578, 1991):
//         r(t) = sum_k b_k h(t - t_k - Delta_k; W (1 + gamma_k)).
//     Where the track wraps (end of track -> index) and the written level does not return to
//     its start value, a splice transition sits half a bit before the index (the write
//     splice is in the last gap of the track).
//  2. spindle: bit position x (nominal bit periods from the index) to time by the warp of
//     SpindleWarp; transitions are rendered at their own times (the bit clock is not the
//     sample clock).
//  3. head signal at each sample time: the analytic sum over transitions within +-span
//     widths (pulse.hpp), times the amplitude envelope (scratch dropouts, defects), plus a
//     fraction of the neighbouring track's readback (off-track interference).
//  4. MR asymmetry y = x + c x^2 (Wang & Taratorin 1999, ch. 11).
//  5. thermal asperities: baseline pops, linear rise then exponential decay.
//  6. defective spans: signal removed (envelope 0) and Gaussian noise of a given rms added.
//  7. electronic noise, white at the sample rate; see ChannelNoise for the SNR definition.
//  8. DC offset and baseline wander.
//  9. front-end low-pass (filters.hpp), then the digitizer (digitizer.hpp).
// All amplitudes are in units of the isolated-transition peak A = 1 (Lorentzian) or of the
// saturated level (erf: an isolated transition swings from -1 to +1).

#include <cstddef>
#include <cstdint>
#include <optional>
#include <span>
#include <string>
#include <vector>

#include "common/stream.hpp"
#include "synth/digitizer.hpp"
#include "synth/filters.hpp"
#include "synth/pulse.hpp"
#include "synth/rng.hpp"

namespace salvor::synth {

// Spindle speed. The local bit period at position x is T0 (1 - eps(x)) with
//     eps(x) = offset + drift * sin(2 pi x / drift_period_bits + drift_phase),
// so time from the index is t(x) = x (1 - offset) + drift * P/(2 pi) (cos(2 pi x/P + phase)
// - cos(phase)), in nominal bit periods T0. A positive offset is a faster spindle: the true
// mean bit rate is f0 / (1 - offset).
struct SpindleWarp {
  double offset = 0;              // fraction (1e-6 per ppm)
  double drift = 0;               // amplitude of the slow sinusoidal drift, fraction
  double drift_period_bits = 1;   // period of the drift, bit positions
  double drift_phase = 0;         // radians at x = 0

  double time_at(double x) const;
  double position_at(double t) const;  // inverse (Newton, to 1e-12 bit)
  double local_period(double x) const { return 1.0 - eps(x); }
  double eps(double x) const;
};

struct MediaNoise {
  double jitter_bits = 0;   // sigma_j, rms transition position jitter, channel bit periods
  double width_sigma = 0;   // sigma_w, rms relative variation of PW50 (or T50) per transition
};

// The transitions of one written track, positions in bits from the index, with media noise.
struct WrittenTrack {
  size_t bits_per_track = 0;
  std::vector<double> position;   // x_k + Delta_k, ascending before jitter
  std::vector<int8_t> polarity;   // b_k = +-1
  std::vector<float> width_factor;  // 1 + gamma_k (clamped to >= 0.2)
  bool has_splice = false;        // a splice transition at x = L - 0.5 back to the initial level
};

// Builds the written track from channel bits (0/1 per byte, NRZI domain; `initial_level`
// (-1 or +1) is the written level before bit 0, as the format descriptor states). Media
// noise is drawn from `media_seed` in bit order.
WrittenTrack write_track(std::span<const uint8_t> channel_bits, const MediaNoise& noise,
                         uint64_t media_seed, int initial_level = -1);

// A span of bit positions where the written signal is attenuated: a scratch or a defect.
// The envelope is 1 - depth * w(x) with w rising from 0 to 1 over `edge_bits` by a raised
// cosine, 1 inside, and falling again. Given in positions within the revolution [0, L);
// it repeats every revolution.
struct AmplitudeDropout {
  double start_bit = 0;
  double length_bits = 0;
  double depth = 1;       // 1 = no signal left
  double edge_bits = 0;
};

// A thermal asperity: the baseline jumps by `amplitude` within `rise_bits`, then decays with
// time constant `decay_bits` (bit periods). Position within the revolution.
struct ThermalAsperity {
  double position_bit = 0;
  double amplitude = 1;
  double rise_bits = 4;
  double decay_bits = 300;
};

// A defective span: no written signal, Gaussian noise of rms `noise_rms` instead.
struct DefectSpan {
  double start_bit = 0;
  double length_bits = 0;
  double noise_rms = 0.3;
};

enum class WanderKind { none, sine, random };

struct FrontEnd {
  double mr_asymmetry = 0;         // c in y = x + c x^2
  double dc_offset = 0;
  WanderKind wander = WanderKind::none;
  double wander_amplitude = 0;     // sine: peak; random: rms
  double wander_period_bits = 0;   // sine: period in bit periods
  double wander_corner_rel = 0;    // random: one-pole corner as a fraction of the bit rate
  int lowpass_order = 0;           // 0 = no low-pass
  double lowpass_corner_rel = 0;   // corner as a fraction of the nominal bit rate f0
};

// Electronic noise. SNR is defined as SNR_dB = 20 log10(A / sigma_n), with A the isolated-
// transition peak (Lorentzian) or saturated level (erf), and sigma_n the rms of the
// electronic noise within the channel-bit Nyquist band |f| < 1/(2T), T the nominal bit
// period. White noise at sample rate fs therefore has per-sample variance
// sigma_n^2 * fs * T. This is a channel-density variant of the peak SNR of Lorentzian-channel
// papers (Moon & Zeng, IEEE Trans. Magn. 31(2):1083-1088, 1995; from memory).
struct ChannelNoise {
  std::optional<double> snr_db;    // nullopt: no electronic noise
};

struct RenderConfig {
  PulseModel model = PulseModel::lorentzian;
  double density = 2.0;            // PW50/T or T50/T, nominal bit periods
  double span_widths = 10;         // truncation half-span, in PW50 (or T50)
  double amplitude = 1.0;          // A of this capture (a weak head may read lower)
  double samples_per_bit = 2.5;    // fs / f0 (nominal bit rate f0)
  double lead_bits = 1000;         // capture starts at position -lead_bits
  double tail_bits = 1000;         // and ends at position L + tail_bits
  double sampling_phase = 0;       // first sample at (phase) sample periods after the start, [0,1)
  SpindleWarp spindle;
  ChannelNoise noise;
  FrontEnd front_end;
  DigitizerConfig digitizer;
  double offtrack_fraction = 0;    // fraction of the neighbour's readback added
  std::vector<AmplitudeDropout> dropouts;           // on this track
  std::vector<AmplitudeDropout> neighbour_dropouts; // on the neighbour
  std::vector<ThermalAsperity> asperities;
  std::vector<DefectSpan> defects;
  uint64_t noise_seed = 1;         // electronic noise of this capture
  uint64_t aux_seed = 2;           // wander and defect noise of this capture
};

class Renderer {
 public:
  // `track` and `neighbour` must outlive the renderer. `neighbour` may be null when
  // offtrack_fraction is 0.
  Renderer(const RenderConfig& cfg, const WrittenTrack& track, const WrittenTrack* neighbour);

  // Fills `out` with the next samples (digitized, normalised to full scale +-1) and returns
  // how many were written (fewer than out.size() only at the end of the capture).
  Progress process(std::span<float> out);
  // Same chain without the digitizer (units of A), for tests and analysis.
  Progress process_analog(std::span<double> out);
  void reset();
  std::string describe() const;

  size_t total_samples() const { return total_samples_; }
  size_t produced() const { return next_sample_; }
  double sample_rate_over_bit_rate() const { return cfg_.samples_per_bit; }
  // Fractional sample index at which the index (position 0) passes under the head.
  double index_sample() const;
  // Times in nominal bit periods of the rendered transitions of the main track, in
  // capture order, with their positions (for tests).
  const std::vector<double>& transition_times() const { return main_.time; }
  // Sample index -> time, nominal bit periods from the index.
  double time_of_sample(double i) const;
  double electronic_sigma_per_sample() const { return sigma_w_; }
  uint64_t clipped_samples() const { return clipped_; }
  // Group delay of the front-end low-pass at low frequency, in nominal bit periods (0 without
  // a filter): the filtered signal lags the transition times by about this much.
  double lowpass_group_delay_bits() const;

 private:
  struct TimedTransitions {
    std::vector<double> time;
    std::vector<double> amp;        // b_k * A
    std::vector<double> half_w2;    // (W_k / 2)^2 (Lorentzian) or the erf scale 2 sqrt(ln2)/W_k
    double start_level = 0;         // erf: level before the first transition, times A
    // window state
    size_t lo = 0, hi = 0;
    double passed_level = 0;        // erf: start_level + sum of 2 b_k A of passed transitions
  };
  struct TimeInterval {
    double t0, t1;
    size_t index;  // into the config vector
    bool neighbour = false;
  };
  void build_transitions(const WrittenTrack& w, TimedTransitions& out) const;
  double head_signal(TimedTransitions& tr, double t) const;
  double envelope(const std::vector<AmplitudeDropout>& d, double x) const;
  void render_block(std::span<double> out);

  RenderConfig cfg_;
  const WrittenTrack* track_;
  const WrittenTrack* neighbour_;
  TimedTransitions main_, nb_;
  double width_;                 // density, bit periods
  double window_;                // span_widths * density
  double t_start_;               // time of the capture start
  double dt_;                    // sample period in nominal bit periods
  size_t total_samples_ = 0;
  size_t next_sample_ = 0;
  double sigma_w_ = 0;
  std::vector<TimeInterval> dropout_times_, defect_times_;
  std::vector<double> asperity_times_;
  std::vector<size_t> asperity_index_;
  RandomStream noise_rng_;
  RandomStream aux_rng_;
  double wander_phase_ = 0;
  double wander_state_ = 0;
  double wander_a_ = 0;
  std::optional<ButterworthLowpass> lowpass_;
  Digitizer digitizer_;
  std::vector<double> work_;
  uint64_t clipped_ = 0;
};

}  // namespace salvor::synth
