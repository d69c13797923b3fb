#pragma once
// From a detector's declared target to a ready equalizer configuration: fixed targets
// take their registry taps, generalized (GPR) targets are designed jointly with the
// equalizer from training statistics (Moon & Zeng 1995, mmse_target.hpp). With training
// statistics a fixed-target equalizer starts from the Wiener taps R^-1 P f instead of a
// unit main tap, so LMS starts at the optimum for the training data.

#include "equalize/equalizer.hpp"
#include "equalize/mmse_target.hpp"
#include "equalize/targets.hpp"

namespace salvor::equalize {

// `base` supplies every other setting (taps, delay, step size, ...). `training` may be
// null for fixed targets; it must match base.taps and base.delay and hold at least the
// target's length of levels. Throws Error(usage) for target "none" (nothing to equalize)
// or a GPR target without training statistics.
EqualizerConfig configure_for_target(const TargetSpec& spec, EqualizerConfig base, const SecondOrderStats* training);

}  // namespace salvor::equalize
