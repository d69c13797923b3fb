#include "synth/rng.hpp"

#include <cmath>
#include <numbers>

namespace salvor::synth {

namespace {
uint64_t splitmix64(uint64_t x) {
  x += 0x9E3779B97F4A7C15ULL;
  x = (x ^ (x >> 30)) * 0xBF58476D1CE4E5B9ULL;
  x = (x ^ (x >> 27)) * 0x94D049BB133111EBULL;
  return x ^ (x >> 31);
}
}  // namespace

uint64_t derive_seed(uint64_t base, std::initializer_list<uint64_t> path) {
  uint64_t s = splitmix64(base);
  for (uint64_t p : path) s = splitmix64(s ^ splitmix64(p + 0x632BE59BD9B4E019ULL));
  return s;
}

double RandomStream::gaussian() {
  if (have_spare_) {
    have_spare_ = false;
    return spare_;
  }
  const double u1 = uniform_open0();
  const double u2 = uniform();
  const double r = std::sqrt(-2.0 * std::log(u1));
  const double phi = 2.0 * std::numbers::pi * u2;
  spare_ = r * std::sin(phi);
  have_spare_ = true;
  return r * std::cos(phi);
}

}  // namespace salvor::synth
