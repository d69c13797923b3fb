#pragma once
// The trellis of a partial-response channel with binary (NRZ, +1/-1) written levels and
// a target f = f0 + f1 D + ... + f(L-1) D^(L-1), L <= 6 (memory <= 5, <= 32 states).
//
// Literature: G. D. Forney, "The Viterbi algorithm", Proc. IEEE 61(3):268-278, 1973
// (state = the last `memory` inputs); G. D. Forney, "Maximum-likelihood sequence
// estimation of digital sequences in the presence of intersymbol interference",
// IEEE Trans. IT-18(3):363-378, 1972 (error events and minimum distance).
//
// State encoding at time k: bit i holds the level x_(k-i) (1 = +1, 0 = -1), i < memory.
// The two branches into state s differ only in the oldest level x_(k-memory) of the
// predecessor, held as the branch index j in {0, 1}: pred = (s >> 1) | (j << (memory-1)).
// A branch therefore carries the whole window x_k .. x_(k-memory), the "branch word"
// s | (j << memory), which is what pattern-dependent noise models are indexed by.
// Data is kept as structure-of-arrays over states (one array per branch index), so a
// later SIMD kernel can run the add-compare-select over all states at once.

#include <array>
#include <cstdint>
#include <span>
#include <string>
#include <vector>

namespace salvor::trellis {

inline constexpr int kMaxMemory = 5;
inline constexpr int kMaxStates = 1 << kMaxMemory;
inline constexpr int kMaxTaps = kMaxMemory + 1;

class Trellis {
 public:
  // `target` f0 first, 1..6 finite taps, not all zero. `min_memory` >= 1 lets a caller
  // ask for more states than the target needs (pattern-dependent models look further
  // back); memory is always >= 1 so that the NRZI bit of every branch is known.
  explicit Trellis(std::span<const double> target, int min_memory = 1);

  int memory() const { return memory_; }
  int states() const { return states_; }
  const std::vector<double>& taps() const { return taps_; }

  // Branch j into state s: predecessor state, noiseless output, NRZI bit, and the index
  // of the output in distinct_outputs() (for metrics computed once per distinct value).
  uint8_t pred(int j, int s) const { return pred_[j][s]; }
  double output(int j, int s) const { return out_[j][s]; }
  uint8_t nrzi(int j, int s) const { return nrzi_[j][s]; }
  uint8_t output_index(int j, int s) const { return out_index_[j][s]; }
  const std::vector<double>& distinct_outputs() const { return distinct_; }
  // The branch word: levels x_k .. x_(k-memory) as bits (bit i = x_(k-i)).
  int branch_word(int j, int s) const { return s | (j << memory_); }

  // Arrays for kernels that run over all states.
  const uint8_t* pred_row(int j) const { return pred_[j].data(); }
  const double* output_row(int j) const { return out_[j].data(); }

  static double level_of(int state, int age) { return ((state >> age) & 1) ? 1.0 : -1.0; }

  std::string describe() const;

 private:
  int memory_;
  int states_;
  std::vector<double> taps_;
  std::array<std::vector<uint8_t>, 2> pred_;
  std::array<std::vector<double>, 2> out_;
  std::array<std::vector<uint8_t>, 2> nrzi_;
  std::array<std::vector<uint8_t>, 2> out_index_;
  std::vector<double> distinct_;
};

// ---- error events (Forney 1972) ----
// An input error event e_k = (x_k - x^_k)/2 in {0, +1, -1}, starting and ending with a
// nonzero entry and holding no run of `memory` zeros inside. Its squared distance is
// d^2 = ||e * f||^2 (the Euclidean distance between the two noiseless outputs is 4 d^2).
struct ErrorEvent {
  std::vector<int8_t> e;  // the input error sequence
  double d2 = 0.0;        // ||e * f||^2
  int level_errors = 0;   // nonzero entries w(e)
  int nrzi_errors = 0;    // NRZI bits that differ: k where [e_k != 0] != [e_(k-1) != 0]
};

// Smallest d^2 over all error events (Dijkstra over the 3^memory error states).
double min_squared_distance(std::span<const double> target);

// Every event of length <= max_len with d^2 <= d2_max + 1e-9 (depth-first search).
std::vector<ErrorEvent> error_events(std::span<const double> target, double d2_max, int max_len);

// Union-bound multiplicities for i.i.d. equiprobable levels: sum over the events with
// d^2 = d2min of weight * 2^-w(e), with weight = w(e) (level errors) or NRZI bit errors.
struct Multiplicity {
  double d2min = 0.0;
  double level = 0.0;  // K of the level-error rate
  double nrzi = 0.0;   // K of the NRZI bit-error rate
};
Multiplicity union_bound_multiplicity(std::span<const double> target, int max_len);

}  // namespace salvor::trellis
