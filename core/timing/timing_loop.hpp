#pragma once
// Timing recovery: a second-order digital PLL driving a cubic Farrow interpolator. Input:
// samples at a nominal `samples_per_bit` (>= 2, from the resampler). Output: one sample
// per channel bit, taken at the transition instants of the bit grid (where a written
// transition of bit k peaks), with its capture position, the loop state and the
// instantaneous frequency estimate.
//
// Literature:
//  - interpolation-based timing recovery: F. M. Gardner, "Interpolation in digital modems,
//    part I: fundamentals", IEEE Trans. Commun. 41(3):501-507, 1993; cubic Lagrange in
//    Farrow form (timing/farrow.hpp).
//  - timing error detector: K. H. Mueller & M. Mueller, "Timing recovery in digital
//    synchronous data receivers", IEEE Trans. Commun. COM-24(5):516-531, 1976, with
//    target-level decisions as in R. D. Cideciyan, F. Dolivo, R. Hermann, W. Hirt &
//    W. Schott, "A PRML system for digital magnetic recording", IEEE JSAC 10(1):38-56,
//    1992: z_k = y_k d_{k-1} - y_{k-1} d_k.
//  - zero-phase start on the 2T preamble (Cideciyan et al. 1992): the phase of the
//    1/(4T) line over a few preamble samples restarts the sampling clock near zero phase
//    error; the phase advance between two halves of the window gives the frequency.
//  - loop gains from noise bandwidth and damping: M. Rice, "Digital Communications: A
//    Discrete-Time Approach", 2009, app. C (timing/loop_gains.hpp).
//
// Modes:
//  search   the clock free-runs at the last frequency; a sliding window looks for the
//           preamble line at 1/(4T) (fraction of window energy in that DFT bin).
//  acquire  after ZPS: wide loop, Mueller-Mueller on the known 2T tone (decisions 0, +-P).
//  track    narrow loop, Mueller-Mueller on the output of a fixed EPR4 prefilter
//           (timing/prefilter.hpp) with five-level EPR4 decisions. Why a prefilter: the
//           raw Lorentzian samples at PW50/T ~ 2-3 have too much intersymbol interference
//           for symbol-by-symbol decisions, and the adaptive equalizer comes later in the
//           pipeline; a symmetric least-squares FIR keeps the detector's zero at the
//           transition instant for any PW50 error, so a PW50 guess only costs noise,
//           and a decision-directed NLMS (taps kept symmetric) adapts it to the real
//           PW50 while tracking.
//           A lock detector (signal and slicer-error power) drops back to search, so the
//           loop reacquires at the next preamble after a dropout. Every preamble passed
//           while tracking is checked: when its tone says the loop is more than 0.2 bit
//           off, the loop restarts there (zero-phase start, acquire), as a read channel
//           acquires each sector on its own.
// Cycle slips: a slip moves the sampling grid by a whole bit. The loop counts the slips it
// can see itself: a reference clock (a PI loop at a quarter of the tracking bandwidth)
// follows the sampling instants; when the grid walks more than half a bit away from it,
// a slip is counted and the reference moves by one bit. That catches a loop that walks
// off (noise, a defect); an input whose timing runs away faster than the loop can follow
// leaves the grid in place and is not seen here: analysis::SyncSearch compares sync-mark
// spacing with the track layout for those.

#include <complex>
#include <cstdint>
#include <deque>
#include <span>
#include <string>
#include <vector>

#include "common/stream.hpp"
#include "timing/loop_gains.hpp"

namespace salvor::timing {

struct TimingLoopConfig {
  double samples_per_bit = 2.0;      // nominal input samples per channel bit, >= 2
  double initial_rate_offset = 0.0;  // prior relative bit-rate offset (bits faster = positive)
  double acquire_bandwidth = 0.02;   // BnT while acquiring on the preamble
  double track_bandwidth = 0.004;    // BnT while tracking data
  double damping = 0.707;            // zeta of both loops
  double pw50_bits = 2.0;            // PW50 guess for the in-loop EPR4 prefilter
  int prefilter_taps = 11;           // odd
  double prefilter_step = 0.01;      // NLMS step of the prefilter in track mode (0 = fixed)
  int detect_window = 24;            // bits per preamble-detection window (multiple of 8, 16..256)
  double detect_threshold = 0.7;     // fraction of window energy in the 1/(4T) line to detect
  int acquire_bits = 32;             // bits of acquisition before switching to tracking
  double max_rate_offset = 0.05;     // |frequency offset| the loop may reach
  double min_signal_power = 0.05;    // lock detector: mean (q/G)^2 below this = no signal
  double max_error_power = 0.1;      // lock detector: mean slicer error^2 (q/G units) above = lost
  int lock_average_bits = 64;        // time constant of the lock detector averages
  int trace_decimation = 256;        // bits per trace point
  size_t trace_capacity = 4096;      // trace points and lock events kept until drained
  double position_offset = 0.0;      // capture position = offset + scale * input index
  double position_scale = 1.0;
  bool midpoints = true;             // also interpolate half way between bit instants (BitSample::midpoint; 0 when off)
};

enum class TimingState : uint8_t { search = 0, acquire = 1, track = 2 };
const char* to_string(TimingState s);

struct BitSample {
  float value = 0;            // interpolated sample at the bit instant
  float midpoint = 0;         // interpolated sample half way since the previous bit instant
  double position = 0;        // capture position of the bit instant (input samples, scaled)
  float phase_error = 0;      // timing error detector output, bits (positive: sampled late)
  float rate_offset = 0;      // relative bit-rate offset estimate (bits faster = positive)
  TimingState state = TimingState::search;
};

struct TimingTracePoint {
  uint64_t bit = 0;           // output bit index
  double position = 0;        // capture position
  double rate_offset = 0;     // relative bit-rate offset
  double phase_error_rms = 0; // rms detector output over the interval, bits
  TimingState state = TimingState::search;
};

struct LockEvent {
  uint64_t bit = 0;
  double position = 0;
  bool locked = false;        // true: tracking started; false: lock lost
};

struct TimingStats {
  uint64_t bits = 0;          // output samples so far
  uint64_t locked_bits = 0;   // of which in track mode
  uint64_t acquisitions = 0;  // zero-phase starts
  uint64_t lock_losses = 0;
  uint64_t cycle_slips = 0;   // grid moved by half a bit or more against the reference clock
  uint64_t trace_dropped = 0; // trace points / events dropped because nobody drained them
  double rate_offset = 0;     // current estimate
  TimingState state = TimingState::search;
};

class TimingLoop {
 public:
  explicit TimingLoop(const TimingLoopConfig& cfg);

  // Consumes input samples and writes bit samples; stops when `out` is full.
  Progress process(std::span<const float> in, std::span<BitSample> out);
  void reset();
  std::string describe() const;

  const TimingStats& stats() const { return stats_; }
  // Moves the pending trace points / lock events into `dst` (appending).
  void drain_trace(std::vector<TimingTracePoint>& dst);
  void drain_events(std::vector<LockEvent>& dst);

  // The prefilter taps in use (symmetric: the loop adapts taps 0..n/2 and mirrors them here).
  std::vector<double> prefilter() const {
    std::vector<double> w = taps_;
    for (size_t i = 0; i < w.size() / 2; ++i) w[w.size() - 1 - i] = w[i];
    return w;
  }
  // Slope of the data-mode detector's S-curve for unit amplitude (per bit), from the
  // Lorentzian model with i.i.d. channel bits; the detector output is divided by it.
  double data_detector_slope() const { return data_slope_; }
  // Lock-detector averages in units of the EPR4 level G (track mode): mean slicer error
  // power and mean signal power.
  double slicer_error_power() const { return err_pow_; }
  double signal_power() const { return sig_pow_; }

 private:
  // kHalfTaps: prefilter_taps / 2 known at compile time (0: read from the configuration).
  template <size_t kHalfTaps>
  void produce_one(BitSample& out);
  double interpolate(double t) const;
  double sample_at(int64_t index) const;
  void enter_search();
  void enter_track(double t);
  void set_track_scales();  // reciprocals used per bit while tracking
  bool detect_preamble(double& ratio) const;
  void slide_detection_window(double y);  // adds y to recent_ and updates the running sums
  void recompute_detection_sums();
  void exact_detection_sums(std::complex<double>& old_half, std::complex<double>& new_half, double& energy) const;
  bool zero_phase_start(double min_shift_bits);  // false: residual below min, nothing done
  void push_trace(const TimingTracePoint& p);
  void push_event(const LockEvent& e);

  TimingLoopConfig cfg_;
  LoopGains acquire_gains_, track_gains_, reference_gains_;
  std::vector<double> fir_;
  double data_slope_ = 0;

  // input history: a ring indexed by absolute input index (power-of-two size: index & mask)
  static constexpr size_t kInputBlock = 64;  // input samples taken per turn of process()
  std::vector<double> hist_;
  int64_t hist_mask_ = 0;
  int64_t newest_ = -1;  // absolute index of the newest input sample

  // clock
  double next_time_ = 0;  // input index of the next bit instant
  double prev_time_ = 0;  // input index of the previous bit instant
  double rate_int_ = 0;   // loop integrator: relative period correction (1 - rate_int) * spb
  double pending_shift_ = 0;
  double ref_time_ = 0, ref_rate_ = 0;  // cycle-slip reference clock: next instant, integrator  // zero-phase-start correction of the next instant, input samples

  TimingState state_ = TimingState::search;
  int state_bits_ = 0;  // bits since entering the current state
  int detect_run_ = 0;  // consecutive bits with the preamble line detected
  bool reacquiring_ = false;  // acquiring on a preamble while the loop was locked

  // last bit values for detection / ZPS (ring of detect_window)
  std::vector<double> recent_;
  uint64_t recent_count_ = 0;
  uint64_t recent_slot_ = 0;  // recent_count_ % recent_.size()
  uint64_t recent_n_ = 0;     // recent_.size()
  // Running sums over the newest detect_window entries of recent_, so that preamble
  // detection costs O(1) per bit: DFT bin 1/(4T) of the older and the newer half (phase
  // referenced to the absolute bit count, which leaves the norms unchanged) and energy.
  std::complex<double> detect_old_half_ = 0, detect_new_half_ = 0;
  double detect_energy_ = 0;
  int bits_since_recompute_ = 0;

  // prefilter delay line (ring of prefilter_taps) and its output history
  std::vector<double> taps_;      // prefilter taps in use (adapted in track mode; only 0..n/2 kept up to date)
  size_t nt_ = 0;                 // taps_.size()
  std::vector<double> fir_line_;  // doubled delay line: y_{k-i} = fir_line_[fir_pos_ + nt - i]
  size_t fir_pos_ = 0;
  std::vector<double> recent_q_;  // last 16 prefilter outputs
  double line_power_ = 0;         // sum of squares over the prefilter line (running)
  int bits_since_power_ = 0;

  // detectors
  double prev_y_ = 0, prev_dy_ = 0;  // tone detector: previous sample and decision
  double prev_q_ = 0, prev_dq_ = 0;  // data detector
  double tone_amp_ = 1;              // P: tone amplitude from ZPS
  double data_gain_ = 1;             // G: EPR4 level of a single transition
  double inv_gain_ = 1, inv_error_scale_ = 1, inv_lock_average_ = 1, inv_spb_ = 1;  // set_track_scales()
  double rate_limit_ = 0;            // |rate_int_| bound from max_rate_offset (set_track_scales())
  double sig_pow_ = 0, err_pow_ = 0; // lock detector averages


  // trace
  double trace_err2_ = 0;
  int trace_n_ = 0;
  std::deque<TimingTracePoint> trace_;
  std::deque<LockEvent> events_;

  TimingStats stats_;
};

}  // namespace salvor::timing
