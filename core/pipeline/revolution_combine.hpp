#pragma once
// Combining the revolutions of one track in the waveform: every revolution is aligned to
// the first by cross-correlation (FFTW) in overlapping segments, to a fraction of a
// sample (parabolic interpolation of the correlation peak), resampled onto the first
// revolution's time grid with the cubic Lagrange interpolator, and the aligned waveforms
// are averaged. The written signal (and its media noise) repeats from revolution to
// revolution while the electronic noise does not, so N revolutions gain about
// 10 log10(N) dB against electronic noise (common practice in multi-read averaging; the
// measured gain is a test). Segmented alignment follows the slightly different spindle
// speed of each revolution. Memory: the revolutions of one track (bounded by the track
// length, not by anything else).

#include <filesystem>
#include <vector>

namespace salvor::pipeline {

struct CombinedCapture {
  std::vector<float> samples;      // on the first revolution's time grid
  double sample_rate_hz = 0;
  std::vector<double> lag_rms;     // per added revolution: rms of its residual lag changes (samples)
};

// `captures` are the revolutions of one track (the first is the reference). Each is read
// with its sidecar; throws salvor::Error(input) for unreadable captures or different
// sample rates.
CombinedCapture combine_revolutions(const std::vector<std::filesystem::path>& captures);

// Writes the combined samples as a float WAV with a sidecar copied from the first
// revolution's ("combined_revolutions" lists the sources; "revolution" is the first, whose time grid it uses).
void write_combined_capture(const CombinedCapture& c, const std::filesystem::path& first_capture,
                            const std::vector<int>& revolutions, const std::filesystem::path& out_wav);

}  // namespace salvor::pipeline
