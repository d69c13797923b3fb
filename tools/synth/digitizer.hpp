#pragma once
// The rig's digitizer: scales by the full-scale amplitude, clips, and rounds to the sample
// format's grid. The output is a float exactly on the grid (q / 2^(bits-1) for integers),
// so a writer converts it to integer codes without any further rounding.

#include <cstdint>
#include <span>
#include <string>

namespace salvor::synth {

enum class SampleFormat { int8, int16, float32 };

std::string to_string(SampleFormat f);
SampleFormat sample_format_from_string(const std::string& s, const std::string& where);
int bytes_per_sample(SampleFormat f);

struct DigitizerConfig {
  SampleFormat format = SampleFormat::int16;
  double full_scale = 2.0;  // analog amplitude (units of A) that maps to digital full scale
};

class Digitizer {
 public:
  explicit Digitizer(const DigitizerConfig& cfg);
  // Returns the number of samples that clipped.
  uint64_t process(std::span<const double> analog, std::span<float> out) const;
  const DigitizerConfig& config() const { return cfg_; }
  std::string describe() const;

 private:
  DigitizerConfig cfg_;
};

// Integer code of a grid value (int8: v*128, int16: v*32768), exact for Digitizer output.
inline int32_t code_of(float v, SampleFormat f) {
  const float scale = f == SampleFormat::int8 ? 128.0f : 32768.0f;
  const float c = v * scale;
  return static_cast<int32_t>(c < 0 ? c - 0.5f : c + 0.5f);
}

}  // namespace salvor::synth
