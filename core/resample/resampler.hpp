#pragma once
// Band-limited arbitrary-ratio resampler: a Kaiser-windowed sinc low-pass, tabulated at
// `phases` fractional offsets per input sample, with linear interpolation between
// adjacent phases.
//
// Literature:
//  - J. O. Smith & P. Gossett, "A flexible sampling-rate conversion method", Proc. IEEE
//    ICASSP 1984, pp. 19.4.1-19.4.4 (windowed-sinc table with linear interpolation
//    between table entries).
//  - J. F. Kaiser, "Nonrecursive digital filter design using the I0-sinh window
//    function", Proc. IEEE ISCAS 1974; design formulas as given in Oppenheim & Schafer,
//    Discrete-Time Signal Processing, 3rd ed., section 7.5.3 [memory]:
//    beta = 0.1102 (A - 8.7) for A > 50 dB, order M = (A - 8) / (2.285 * dw).
//
// Design (defaults; every figure is a field of ResamplerConfig):
//  - The filter runs at the input rate. Its band edges are fractions of the *lower* of
//    the two Nyquist frequencies (the output's when decimating, the input's when
//    interpolating): passband edge 0.80, stopband edge 1.00, cutoff halfway (0.90).
//  - Designed stopband attenuation 90 dB so that, after the table and float rounding,
//    the measured stopband is >= 80 dB (tests/resample measure it: alias of a tone
//    above the new Nyquist).
//  - Passband ripple of the designed filter is 20 log10(1 + 10^(-90/20)) = 0.0003 dB;
//    the stated and tested bound is 0.01 dB up to the passband edge.
//  - Taps per output sample: about 57 * max(1, ratio), rounded up to an even number.
//
// Timing (exact bookkeeping): output sample n is the band-limited value of the input
// at input position  t_n = first_output_position + n * ratio  (input samples, where
// input sample k sits at position k and ratio = input_rate / output_rate). The filter
// is centred on t_n, so there is no group delay to subtract: the capture position of
// every output sample is input_position(n). Input before the first sample and after
// the last one (at flush) counts as zero. After flush() the stream holds exactly the
// outputs with t_n < number of inputs, i.e. ceil((N - first_output_position) / ratio)
// of them, the same count as scipy.signal.resample_poly for first_output_position = 0.
//
// Latency (not a delay): output n can only be emitted once input up to
// floor(t_n) + half_taps() has arrived; flush() supplies the zeros for the tail.
//
// Flags: the flag overload carries a per-sample uint8 flag byte across the same time
// map. The flag of output n is the OR of the flags of every input sample k with
// |k - t_n| <= flag_reach (input samples).

#include <cstdint>
#include <span>
#include <string>
#include <vector>

#include "common/stream.hpp"
#include "condition/flags.hpp"

namespace salvor {

struct ResamplerConfig {
  double input_rate_hz = 0.0;           // sample rate of the incoming stream, > 0
  double output_rate_hz = 0.0;          // wanted sample rate (samples_per_bit * bit rate), > 0
  double passband_edge = 0.80;          // fraction of the lower Nyquist, (0, stopband_edge)
  double stopband_edge = 1.00;          // fraction of the lower Nyquist, (passband_edge, 1.5]
  double stopband_attenuation_db = 90;  // Kaiser design target, [40, 160]
  int phases = 512;                     // table entries per input sample, [16, 8192]
  double first_output_position = 0.0;   // input position of output sample 0, >= 0
  double flag_reach = -1.0;             // input samples; < 0 means max(1, ratio)
  // Convenience: the rate the PLL wants, samples_per_bit * bit_rate_hz.
  static ResamplerConfig for_bit_rate(double input_rate_hz, double bit_rate_hz,
                                      double samples_per_bit);
};

// The filter that a configuration produces (for reports and tests).
struct ResamplerFilterSpec {
  double ratio = 1.0;            // input samples per output sample
  double cutoff = 0.0;           // cycles per input sample (-6 dB point)
  double passband_edge = 0.0;    // cycles per input sample
  double stopband_edge = 0.0;    // cycles per input sample
  double kaiser_beta = 0.0;
  int taps = 0;                  // input samples per output sample (even)
  int phases = 0;
};

// Modified Bessel function of the first kind, order 0 (power series).
double bessel_i0(double x);
// Kaiser beta for a stopband attenuation in dB (Kaiser 1974).
double kaiser_beta(double attenuation_db);

class Resampler {
 public:
  explicit Resampler(const ResamplerConfig& config);

  // Consumes input as long as there is room for the outputs it makes possible. A NaN or
  // infinite sample throws Error(input) naming its index.
  Progress process(std::span<const float> in, std::span<float> out);
  // Same, carrying a flag byte per sample; in_flags.size() must equal in.size() and
  // out_flags.size() must equal out.size().
  Progress process(std::span<const float> in, std::span<const uint8_t> in_flags,
                   std::span<float> out, std::span<uint8_t> out_flags);
  // End of stream: emits the remaining outputs (t_n < inputs consumed), treating input
  // beyond the end as zero. Call until it produces 0; then reset() before reuse.
  Progress flush(std::span<float> out);
  Progress flush(std::span<float> out, std::span<uint8_t> out_flags);

  void reset();
  std::string describe() const;

  const ResamplerFilterSpec& spec() const { return spec_; }
  double ratio() const { return spec_.ratio; }
  int half_taps() const { return spec_.taps / 2; }
  double flag_reach() const { return flag_reach_; }
  // Input position (input samples) of output sample n.
  double input_position(uint64_t n) const { return first_position_ + static_cast<double>(n) * spec_.ratio; }
  uint64_t inputs_consumed() const { return in_index_; }
  uint64_t outputs_produced() const { return next_out_; }

  // Frequency response magnitude of the tabulated filter (linear, DC = 1) at f cycles
  // per input sample, for one fractional phase mu in [0, 1).
  double response(double f, double mu) const;

 private:
  template <bool with_flags>
  Progress run(std::span<const float> in, std::span<const uint8_t> in_flags,
               std::span<float> out, std::span<uint8_t> out_flags, bool flushing);
  void compact(int64_t first_needed);

  ResamplerFilterSpec spec_;
  double first_position_ = 0.0;
  double flag_reach_ = 1.0;
  std::vector<float> table_;   // (phases + 1) rows of `taps` coefficients
  std::vector<float> delta_;   // row p+1 minus row p, for linear interpolation
  // History: input samples [buf_start_, buf_start_ + size_) (zeros before index 0).
  std::vector<float> buf_;
  std::vector<uint8_t> flag_buf_;
  size_t size_ = 0;
  int64_t buf_start_ = 0;
  uint64_t in_index_ = 0;   // inputs consumed so far
  uint64_t next_out_ = 0;   // index of the next output sample
  int64_t zeros_padded_ = 0;  // flush padding appended beyond the input
  bool flushed_ = false;
};

// Output-sample range covered by an input-sample span under the resampler's time map,
// widened by `reach` input samples each side: outputs n with
// span.start - reach <= t_n <= span.end - 1 + reach.
FlagSpan map_span_to_output(const FlagSpan& span, double first_output_position, double ratio,
                            double reach);

}  // namespace salvor
