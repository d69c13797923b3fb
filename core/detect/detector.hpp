#pragma once
// A detector instance made by a plugin, wrapped so that the rest of salvor sees C++:
// RAII (destroy on destruction), status codes and message buffers turned into
// salvor::Error naming the plugin, and the plugin's output checked against the contract
// (bit values 0/1, produced <= capacity, llr sign agreeing with the bit). No C++
// exception ever enters the plugin: every call into it is a plain C call.

#include <cstddef>
#include <cstdint>
#include <memory>
#include <span>
#include <string>
#include <vector>

#include "detect/plugin_host.hpp"

namespace salvor::detect {

class Detector {
 public:
  Detector(std::shared_ptr<const LoadedPlugin> plugin, const DetectorSetup& setup);
  ~Detector();
  Detector(const Detector&) = delete;
  Detector& operator=(const Detector&) = delete;
  Detector(Detector&& other) noexcept;
  Detector& operator=(Detector&& other) noexcept;

  const DetectorInfo& info() const;
  bool can_train() const;
  size_t max_latency() const;
  // Output room a process() call of `count` samples needs.
  size_t capacity_for(size_t count) const { return count + max_latency(); }

  // Learn from samples whose channel bits (NRZI, 0/1) are known; `level_before` is the
  // written level (+1/-1) before the first bit. Error(usage) if the plugin cannot train.
  void train(std::span<const float> samples, std::span<const uint8_t> known_bits, int level_before);
  // Detect: `erasure` is empty or one flag per sample; `bits` and `llr` need
  // capacity_for(samples.size()) room. Returns the number of bits produced.
  size_t process(std::span<const float> samples, std::span<const uint8_t> erasure,
                 std::span<uint8_t> bits, std::span<float> llr);
  // Emits what is still held back (needs max_latency() room); the next process() starts a span.
  size_t flush(std::span<uint8_t> bits, std::span<float> llr);
  void reset();

  // The values in force for every declared parameter (defaults filled in), for run logs.
  const std::vector<std::pair<std::string, double>>& parameter_values() const { return values_; }
  std::string describe() const;  // "peak 1.0.0 target=none threshold=0.4 ..."

 private:
  void check_output(const char* call, size_t produced, size_t capacity, std::span<const uint8_t> bits,
                    std::span<const float> llr) const;
  [[noreturn]] void fail(const char* call, int status, const char* message) const;

  std::shared_ptr<const LoadedPlugin> plugin_;
  void* handle_ = nullptr;
  std::vector<std::pair<std::string, double>> values_;
};

// Parses and range-checks `settings` against the plugin's descriptors. Returns a value
// for every declared key (defaults for the rest). Error(usage, "detector <name>", ...)
// names the key for an unknown key, a malformed value, a value out of range or a wrong type.
std::vector<std::pair<std::string, double>> resolve_parameters(const DetectorInfo& info,
                                                                const ParamSettings& settings);

}  // namespace salvor::detect
