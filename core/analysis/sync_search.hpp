#pragma once
// Preamble-plus-sync-mark search on the PLL's bit-spaced samples, for `salvor inspect`.
//
// Method: normalised cross-correlation of the bit samples with the expected noiseless
// readback of the end of the 2T preamble followed by the sync mark, computed from the
// Lorentzian isolated-transition response h(t) = 1/(1 + (2t/PW50)^2) (Bertram 1994;
// Bergmans 1996) at the transition instants the PLL samples (timing/timing_loop.hpp).
// The written polarity is unknown, so |correlation| is used and its sign reported. A hit
// is the local maximum of a run above the threshold.
//
// Each hit keeps, up to a bound, the samples around it (bit samples and mid-bit samples,
// i.e. two per bit) for channel_fit.hpp, which estimates PW50 and SNR from these known
// bits.
//
// Cycle slips: a slip moves the bit grid by whole bits, which the timing loop cannot see.
// With the track layout (positions of the sync marks in a revolution), the bit distance
// between consecutive hits is compared with the nearest distance the layout allows; a
// mismatch of 1..slip_tolerance bits is counted as a slip of that many bits.

#include <cstddef>
#include <cstdint>
#include <deque>
#include <span>
#include <string>
#include <vector>

#include "timing/timing_loop.hpp"

namespace salvor::analysis {

struct SyncSearchConfig {
  int preamble_bits = 128;               // length of the 2T preamble (channel bits 0101...)
  std::vector<uint8_t> sync_mark;        // channel bits, first transmitted first
  double pw50_bits = 2.0;                // for the expected waveform
  int template_preamble_bits = 16;       // preamble bits in front of the sync mark in the template
  double threshold = 0.8;                // |normalised correlation| to accept
  int fit_preamble_bits = 40;            // preamble bits kept before the sync mark for the fit
  int fit_exclude_tail_bits = 10;        // last sync bits left out (unknown bits follow)
  size_t max_fit_windows = 256;          // windows kept for channel_fit
  size_t max_hits = 1u << 20;            // hits and preambles kept until drained
  int preamble_window = 24;              // bits: preamble detection window (1/(4T) line)
  double preamble_threshold = 0.7;       // fraction of window energy in the line
  // Track layout for the slip check: sync-mark bit positions within one revolution and
  // the revolution length. Empty = no check.
  std::vector<uint64_t> layout_sync_bits;
  uint64_t bits_per_track = 0;
  int slip_tolerance = 4;                // bits
};

struct SyncHit {
  uint64_t bit = 0;            // PLL output index of the first sync-mark bit
  double position = 0;         // its capture position (input samples of the capture)
  double correlation = 0;      // |normalised correlation|
  int polarity = 1;            // +1 or -1: sign of the correlation
  bool locked = false;         // PLL tracking over the whole sync mark
  double rate_offset = 0;      // PLL's mean relative bit-rate offset over the tracked bits since
                               // the previous hit (first hit: over the template window)
  uint64_t rate_bits = 0;      // tracked bits in that mean (0: the first hit's window only)
  long slip_bits = 0;          // bit-count mismatch against the layout since the last hit
};

// A stretch of bit samples where the 1/(4T) line holds most of the energy: a preamble.
struct PreambleHit {
  uint64_t bit = 0;       // PLL output index where the tone run started (about)
  double position = 0;    // its capture position
};

// Samples around a hit, two per bit, in time order: sample 2i is the mid-bit sample of
// bit first_bit + i (at first_bit + i - 1/2), sample 2i+1 the bit sample (at first_bit + i).
// Bit offsets are relative to the first sync-mark bit.
struct FitWindow {
  int first_bit = 0;
  std::vector<float> samples;
};

class SyncSearch {
 public:
  explicit SyncSearch(const SyncSearchConfig& cfg);
  void process(std::span<const timing::BitSample> in);
  void reset();
  std::string describe() const;

  void drain_hits(std::vector<SyncHit>& dst);
  void drain_preambles(std::vector<PreambleHit>& dst);
  uint64_t preambles_total() const { return preambles_total_; }
  const std::vector<FitWindow>& fit_windows() const { return windows_; }
  uint64_t hits_total() const { return hits_total_; }
  uint64_t slips_total() const { return slips_total_; }  // sum of |slip_bits|
  uint64_t slip_events() const { return slip_events_; }
  const std::vector<double>& expected_waveform() const { return template_; }
  // Known transitions (+1/-1/0) at bit offsets from -preamble_bits to sync length - 1,
  // relative to the first sync-mark bit, signs relative to the first preamble transition.
  const std::vector<int>& known_transitions() const { return transitions_; }
  int known_first_bit() const { return -cfg_.preamble_bits; }

 private:
  void finalize(uint64_t bit);
  const timing::BitSample& at(uint64_t bit) const;  // from the ring

  SyncSearchConfig cfg_;
  std::vector<int> transitions_;
  std::vector<double> template_;
  double template_energy_ = 0;
  std::vector<timing::BitSample> ring_;
  uint64_t count_ = 0;  // bit samples seen
  // candidate peak
  bool pending_ = false;
  uint64_t pending_bit_ = 0;  // last bit of the correlation window
  double pending_rho_ = 0;
  // results
  std::deque<SyncHit> hits_;
  std::deque<PreambleHit> preambles_;
  uint64_t preambles_total_ = 0;
  size_t tone_run_ = 0;      // consecutive bits with the 1/(4T) line detected
  double rate_sum_ = 0;      // PLL rate offsets since the last hit (tracked bits)
  uint64_t rate_n_ = 0;
  std::vector<FitWindow> windows_;
  uint64_t hits_total_ = 0, slips_total_ = 0, slip_events_ = 0;
  bool have_last_ = false;
  uint64_t last_hit_bit_ = 0;
};

// Expected noiseless bit-instant samples: sum_j s_j h(k - j) for transitions s_j given at
// bit offsets first_bit.. (h with unit peak), evaluated at bit offsets x.
double lorentzian_readback(const std::vector<int>& transitions, int first_bit, double pw50_bits, double x);

}  // namespace salvor::analysis
