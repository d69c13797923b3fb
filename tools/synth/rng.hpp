#pragma once
// Seeded random streams for the simulator. Every random quantity comes from its own stream,
// derived from the scenario seed and a path of small integers (what, cylinder, head,
// revolution), so the same scenario and seed give byte-identical output whatever the order
// of work, and changing one track does not shift the noise of another.
//
// std::normal_distribution is not specified bit-exactly by the C++ standard and differs
// between library versions, so the Gaussian here is our own Box–Muller transform on
// std::mt19937_64, whose output sequence the standard does specify ([rand.eng.mers],
// 10000th output check value).
// Box & Muller, "A note on the generation of random normal deviates", Ann. Math. Statist.
// 29(2):610–611, 1958. Seed mixing: the SplitMix64 finalizer (Steele, Lea & Flood, "Fast
// splittable pseudorandom number generators", OOPSLA 2014).

#include <cstdint>
#include <initializer_list>
#include <random>

namespace salvor::synth {

// What a stream is for: the first element of every seed path.
enum class StreamKind : uint64_t {
  media_noise = 1,       // transition jitter and width, per written track (same on every revolution)
  electronic_noise = 2,  // per capture
  spindle = 3,           // speed of one revolution
  sampling = 4,          // sampling phase, wander phase, per capture
  defect = 5,            // noise of a defective span, per capture
  image = 6,             // random image content
  drift_phase = 7,       // phase of the slow speed drift, per track
};

// SplitMix64 finalizer applied along the path: a different path gives an unrelated seed.
uint64_t derive_seed(uint64_t base, std::initializer_list<uint64_t> path);

class RandomStream {
 public:
  explicit RandomStream(uint64_t seed) : engine_(seed) {}
  // Uniform on (0, 1]: 53 random bits, never 0 (Box–Muller takes a logarithm).
  double uniform_open0() { return (static_cast<double>(engine_() >> 11) + 1.0) * 0x1.0p-53; }
  // Uniform on [0, 1).
  double uniform() { return static_cast<double>(engine_() >> 11) * 0x1.0p-53; }
  // Standard normal deviate, Box–Muller in its trigonometric form; the second value of
  // each pair is kept for the next call.
  double gaussian();
  uint64_t next_u64() { return engine_(); }
  void reseed(uint64_t seed) {
    engine_.seed(seed);
    have_spare_ = false;
  }

 private:
  std::mt19937_64 engine_;
  bool have_spare_ = false;
  double spare_ = 0.0;
};

}  // namespace salvor::synth
