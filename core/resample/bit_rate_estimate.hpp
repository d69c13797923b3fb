#pragma once
// Channel bit-rate estimate from the 2T preamble (NRZ ++--), a tone at 1/4 of the bit rate.
//
// Method, two stages:
//  1. Coarse line: short Hann-windowed segments (Welch, IEEE Trans. Audio Electroacoust.
//     15(2), 1967), each periodogram normalised to unit energy and squared before it is
//     averaged. Bins whose energy arrives in short concentrated bursts (the preambles) rise
//     far above bins with steady broadband energy (random data), the idea behind spectral
//     kurtosis (J. Antoni, Mech. Syst. Signal Process. 20(2):282-307, 2006) [memory]. The
//     peak in the search range is refined by parabolic interpolation on the log values of
//     the zero-padded spectrum (common practice, no source).
//  2. Fine: complex demodulation at the coarse line, a moving average over 4 periods (which
//     nulls the odd harmonics of the 2T pattern and the image at -2f), detection of
//     preamble segments where that narrowband power is a large fraction of the total, and a
//     pooled least-squares fit of the phase slope over all segments (one intercept per
//     segment: the phase of each preamble is unknown), the phase-slope frequency estimator
//     of S. Tretter, IEEE Trans. Inf. Theory 31(6):832-835, 1985 [memory]. Run twice, the
//     second time demodulating at the first fit.
//
// Accuracy (tests/resample/test_bit_rate_estimate.cpp): within 0.05 % of the true bit rate
// on Lorentzian readbacks sampled at 2.3-5 samples per bit with speed offsets of +-1 %;
// the figure reached is recorded by the test. refine_bit_rate() applies the average
// frequency correction a PLL measured afterwards.
//
// Threading rule for FFTW (FFTW 3 manual, "Thread safety": only fftw_execute is
// thread-safe): LineSpectrum creates its plan in the constructor and destroys it in the
// destructor; construct and destroy LineSpectrum objects (and call estimate_bit_rate) from
// one thread at a time, or hold a lock of the caller's around them. process() may run
// concurrently on distinct objects.

#include <cstddef>
#include <cstdint>
#include <memory>
#include <span>
#include <string>
#include <vector>

namespace salvor {

struct BitRateEstimateConfig {
  double sample_rate_hz = 0.0;        // capture sample rate, > 0
  double nominal_bit_rate_hz = 0.0;   // 0: unknown, search samples_per_bit_range
  double search_fraction = 0.05;      // with a nominal rate: search +- this fraction, (0, 0.5]
  double min_samples_per_bit = 1.6;   // without a nominal rate: search range, >= 1.2
  double max_samples_per_bit = 16.0;  //   ... (min, 64]
  int segment_samples = 256;          // coarse stage segment length, power of two [64, 65536]
  int zero_pad = 4;                   // coarse FFT length = zero_pad * segment_samples, [1, 16]
  double min_preamble_bits = 24.0;    // shortest preamble segment used by the fine stage
  double narrowband_threshold = 0.3;  // fraction of power within the 4-period band (tone: 0.5)
};

struct BitRateEstimate {
  double bit_rate_hz = 0.0;         // fine estimate, or the coarse one if no segment was found
  double coarse_bit_rate_hz = 0.0;  // from the coarse spectral line
  double line_to_floor_db = 0.0;    // coarse line over the median of the search band
  size_t preamble_segments = 0;     // segments used by the fine stage
  uint64_t preamble_samples = 0;    // samples inside them
  double relative_std = 0.0;        // scatter of per-segment estimates / sqrt(count); 0 if < 2
  bool refined() const { return preamble_segments > 0; }
};

// Streaming coarse stage: averaged squared normalised periodograms of short segments.
class LineSpectrum {
 public:
  LineSpectrum(int segment_samples, int zero_pad);
  ~LineSpectrum();
  LineSpectrum(const LineSpectrum&) = delete;
  LineSpectrum& operator=(const LineSpectrum&) = delete;

  void process(std::span<const float> in);
  void reset();
  size_t segments() const { return segments_; }
  size_t fft_size() const { return fft_size_; }
  // The statistic per FFT bin (bin k at k / fft_size cycles per sample).
  const std::vector<double>& statistic() const { return stat_; }

  struct Line {
    double cycles_per_sample = 0.0;
    double line_to_floor_db = 0.0;
  };
  // Peak between lo and hi (cycles per sample); floor = median of the statistic over
  // [floor_lo, floor_hi].
  Line find_line(double lo, double hi, double floor_lo, double floor_hi) const;

 private:
  void add_segment();
  size_t segment_, fft_size_;
  std::vector<float> window_;
  std::vector<float> pending_;  // samples of the segment being filled (50 % overlap)
  size_t pending_size_ = 0;
  std::vector<double> stat_;
  size_t segments_ = 0;
  float* fft_in_ = nullptr;
  void* fft_out_ = nullptr;  // fftwf_complex*
  void* plan_ = nullptr;     // fftwf_plan
};

// Streaming fine stage: phase-slope fit over detected preamble segments, demodulating at
// `line_cycles_per_sample`. Memory: the 4-period moving-average window.
class PreambleToneFit {
 public:
  PreambleToneFit(double line_cycles_per_sample, double min_preamble_bits, double narrowband_threshold);
  void process(std::span<const float> in);
  void finish();  // closes a segment still open at the end
  void reset();

  size_t segments() const { return seg_count_; }
  uint64_t segment_samples() const { return seg_samples_; }
  // Line frequency (cycles per sample) from the pooled fit; the demodulation frequency if
  // no segment was found.
  double line_cycles_per_sample() const;
  double relative_std() const;

 private:
  void close_run();
  double f0_;
  size_t window_;    // moving-average length (4 periods)
  size_t trim_;      // samples dropped at each end of a run (half a window)
  size_t min_run_;
  double threshold_;
  // moving-average state
  std::vector<float> ring_re_, ring_im_, ring_pow_;
  size_t ring_pos_ = 0, ring_fill_ = 0;
  double sum_re_ = 0, sum_im_ = 0, sum_pow_ = 0;
  uint64_t n_ = 0;
  // current run (q above threshold): phases kept for the trailing trim
  bool in_run_ = false;
  uint64_t run_len_ = 0;
  double prev_phase_ = 0.0, unwrap_ = 0.0;
  std::vector<double> tail_;  // last trim_ unwrapped phases of the run (ring)
  double s_n_ = 0, s_nn_ = 0, s_p_ = 0, s_np_ = 0;
  uint64_t s_count_ = 0;
  // pooled sums over closed segments
  double pool_sxy_ = 0, pool_sxx_ = 0;
  double seg_f_sum_ = 0, seg_f_sum2_ = 0;
  size_t seg_count_ = 0;
  uint64_t seg_samples_ = 0;
};

// Both stages over a span of the capture (the caller bounds the span, e.g. a revolution).
BitRateEstimate estimate_bit_rate(std::span<const float> samples, const BitRateEstimateConfig& config);

// A PLL's measured average frequency correction (relative: +0.001 = the clock ran 0.1 %
// faster than assumed) applied to an estimate.
double refine_bit_rate(double bit_rate_hz, double relative_frequency_correction);

}  // namespace salvor
