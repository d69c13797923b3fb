#include "synth/digitizer.hpp"

#include <cmath>
#include <sstream>

#include "common/error.hpp"

namespace salvor::synth {

std::string to_string(SampleFormat f) {
  switch (f) {
    case SampleFormat::int8: return "int8";
    case SampleFormat::int16: return "int16";
    case SampleFormat::float32: return "float32";
  }
  return "?";
}

SampleFormat sample_format_from_string(const std::string& s, const std::string& where) {
  if (s == "int8") return SampleFormat::int8;
  if (s == "int16") return SampleFormat::int16;
  if (s == "float32") return SampleFormat::float32;
  throw_usage(where, "unknown sample format '" + s + "' (expected int8, int16 or float32)");
}

int bytes_per_sample(SampleFormat f) {
  return f == SampleFormat::int8 ? 1 : (f == SampleFormat::int16 ? 2 : 4);
}

Digitizer::Digitizer(const DigitizerConfig& cfg) : cfg_(cfg) {
  if (!(cfg.full_scale > 0) || !std::isfinite(cfg.full_scale))
    throw_usage("capture.full_scale", "full scale must be a positive number");
}

uint64_t Digitizer::process(std::span<const double> analog, std::span<float> out) const {
  uint64_t clipped = 0;
  const double inv = 1.0 / cfg_.full_scale;
  if (cfg_.format == SampleFormat::float32) {
    for (size_t i = 0; i < analog.size(); ++i) {
      double v = analog[i] * inv;
      if (v > 1.0) { v = 1.0; ++clipped; }
      else if (v < -1.0) { v = -1.0; ++clipped; }
      out[i] = static_cast<float>(v);
    }
    return clipped;
  }
  const double levels = cfg_.format == SampleFormat::int8 ? 128.0 : 32768.0;
  for (size_t i = 0; i < analog.size(); ++i) {
    double q = std::floor(analog[i] * inv * levels + 0.5);  // round half up, deterministic
    if (q > levels - 1) { q = levels - 1; ++clipped; }
    else if (q < -levels) { q = -levels; ++clipped; }
    out[i] = static_cast<float>(q / levels);
  }
  return clipped;
}

std::string Digitizer::describe() const {
  std::ostringstream o;
  o << "digitizer " << to_string(cfg_.format) << ", full scale " << cfg_.full_scale << " A";
  return o.str();
}

}  // namespace salvor::synth
