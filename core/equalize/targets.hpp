#pragma once
// Partial-response targets by name. A detector plugin declares the target it wants as a
// string; this registry turns the string into taps (f0 first) or says that the target is
// generalized (designed from training data by MMSE, see mmse_target.hpp) or absent.
//
// Targets (Kretzmer 1966; Kobayashi & Tang, IBM J. Res. Dev. 14(4), 1970; Thapar & Patel,
// IEEE Trans. Magn. 23(5), 1987, the (1-D)(1+D)^n family):
//   dicode 1-D, PR4 1-D^2, EPR4 1+D-D^2-D^3, E2PR4 1+2D-2D^3-D^4.

#include <cstddef>
#include <string>
#include <string_view>
#include <vector>

namespace salvor::equalize {

enum class TargetKind {
  none,         // the detector wants the unequalized bit-spaced signal
  fixed,        // a fixed polynomial from the registry
  generalized,  // a monic target of `length` taps designed by MMSE from training data
};

struct TargetSpec {
  TargetKind kind = TargetKind::none;
  std::string name;          // canonical spelling: "none", "dicode", "PR4", "EPR4", "E2PR4", "GPR4"
  std::vector<double> taps;  // fixed targets: f0..f(L-1); empty otherwise
  size_t length = 0;         // number of taps (fixed or generalized); 0 for none
};

inline constexpr size_t kMinGprLength = 3;
inline constexpr size_t kMaxGprLength = 5;
inline constexpr size_t kDefaultGprLength = 4;

// Case-insensitive lookup. "GPR" takes `gpr_length` (3..5); "GPR3".."GPR5" carry their own
// length. Throws salvor::Error(usage) naming the string and the known names.
TargetSpec lookup_target(std::string_view name, size_t gpr_length = kDefaultGprLength);

// True when lookup_target would accept `name` (with the default GPR length).
bool is_known_target(std::string_view name);

// The canonical names, for help texts and listings.
std::vector<std::string> known_target_names();

// "1 + 2D - 2D^3 - D^4" style text for logs.
std::string polynomial_text(const std::vector<double>& taps);

}  // namespace salvor::equalize
