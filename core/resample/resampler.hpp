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
//
// Exact polyphase: when the ratio equals P/Q to double precision with Q <=
// max_exact_denominator (5/4 for 2.5 -> 2 samples per bit), only Q fractional offsets
// ever occur; each gets its own filter designed at exactly that offset (same design,
// no table interpolation) and floor(t_n) is tracked in integers (n = b Q + k:
// floor(first) + b P + a per-k offset). Any other ratio uses the interpolated table above.
// Designing Q rows instead of a table makes construction cheap (microseconds); the
// coefficients are immutable and shared by copies of a Resampler.
//
// Kernels: the dot products run in a SIMD kernel chosen at run time (Highway: AVX-512,
// AVX2, SSE4, ...). Its arithmetic is defined by the portable scalar reference
// (scalar_reference = true): taps padded to a multiple of 16, 16 partial sums (tap j
// into sum j mod 16, fused multiply-add), then a fixed pairwise tree. Targets with FMA
// reproduce the reference bit for bit; targets without (SSE4) round the products
// separately and differ in the last bits (tests/resample state the tolerance).

#include <cstdint>
#include <memory>
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
  int max_exact_denominator = 64;       // exact polyphase for ratios P/Q, Q <= this; 0: never
  bool scalar_reference = false;        // run the portable scalar kernel (the SIMD reference)
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
  int phases = 0;                // table entries per input sample (interpolated path)
  int exact_phases = 0;          // Q when the ratio is P/Q on the exact polyphase path, else 0
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
  struct Filter;  // immutable coefficients, shared by copies (resampler.cpp)

  template <bool with_flags>
  Progress run(std::span<const float> in, std::span<const uint8_t> in_flags,
               std::span<float> out, std::span<uint8_t> out_flags, bool flushing);
  void compact(int64_t first_needed);
  // floor(t_n) as the kernels place output n (integer bookkeeping on the exact path).
  int64_t base_index(uint64_t n) const;
  // Outputs from next_out_ on (at most `room`) whose taps end at or before input `last`.
  size_t outputs_within(int64_t last, size_t room) const;
  void compute(uint64_t n0, size_t count, float* out) const;

  ResamplerFilterSpec spec_;
  double first_position_ = 0.0;
  double flag_reach_ = 1.0;
  bool scalar_reference_ = false;
  std::shared_ptr<const Filter> filter_;
  // History: input samples [buf_start_, buf_start_ + size_) (zeros before index 0), plus
  // room for the kernel to read a padded tap block past the end.
  std::vector<float> buf_;
  std::vector<uint8_t> flag_buf_;
  size_t capacity_ = 0;     // most samples the history holds
  size_t size_ = 0;
  int64_t buf_start_ = 0;
  uint64_t in_index_ = 0;   // inputs consumed so far
  uint64_t next_out_ = 0;   // index of the next output sample
  int64_t last_flagged_ = 0;  // index of the newest input with a nonzero flag (or far below)
  int64_t zeros_padded_ = 0;  // flush padding appended beyond the input
  bool flushed_ = false;
};

// Output-sample range covered by an input-sample span under the resampler's time map,
// widened by `reach` input samples each side: outputs n with
// span.start - reach <= t_n <= span.end - 1 + reach.
FlagSpan map_span_to_output(const FlagSpan& span, double first_output_position, double ratio,
                            double reach);

}  // namespace salvor
