#include "equalize/design.hpp"

#include "common/error.hpp"

namespace salvor::equalize {

EqualizerConfig configure_for_target(const TargetSpec& spec, EqualizerConfig base, const SecondOrderStats* training) {
  if (spec.kind == TargetKind::none) {
    throw_usage("target none", "the detector wants the unequalized signal: no equalizer to configure");
  }
  if (training) {
    if (training->r.rows != base.taps || training->delay != base.delay || training->p.cols < spec.length) {
      throw_usage("equalizer training statistics",
                  "made for " + std::to_string(training->r.rows) + " taps, delay " + std::to_string(training->delay) +
                      " and " + std::to_string(training->p.cols) + " levels; need " + std::to_string(base.taps) +
                      " taps, delay " + std::to_string(base.delay) + " and " + std::to_string(spec.length) + " levels");
    }
  }
  MmseDesignConfig dc{base.taps, base.delay, spec.length, MmseDesignConfig{}.diagonal_loading};
  base.target_name = spec.name;
  if (spec.kind == TargetKind::fixed) {
    base.target = spec.taps;
    if (training) {
      const MmseDesignConfig wc{base.taps, base.delay, training->p.cols, dc.diagonal_loading};
      base.initial_taps = solve_wiener(*training, spec.taps, wc).taps;
    }
    return base;
  }
  if (!training) throw_usage("target " + spec.name, "a generalized target needs training statistics to be designed");
  const GprDesign g = solve_monic_gpr(*training, dc);  // uses the first `length` levels
  base.target = g.target;
  base.initial_taps = g.equalizer;
  return base;
}

}  // namespace salvor::equalize
