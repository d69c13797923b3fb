#include "synth/renderer.hpp"

#include <algorithm>
#include <cmath>
#include <numbers>
#include <sstream>

#include "common/error.hpp"

namespace salvor::synth {

namespace {
constexpr double kTwoPi = 2.0 * std::numbers::pi;
constexpr double kErfScale = 1.6651092223153954;  // 2 sqrt(ln 2), see pulse.hpp

// Raised-cosine ramp 0 -> 1 over [0, e].
double ramp(double u, double e) {
  if (e <= 0) return u >= 0 ? 1.0 : 0.0;
  if (u <= 0) return 0.0;
  if (u >= e) return 1.0;
  return 0.5 - 0.5 * std::cos(std::numbers::pi * u / e);
}
}  // namespace

// ---- spindle ------------------------------------------------------------------------------

double SpindleWarp::eps(double x) const {
  return offset + drift * std::sin(kTwoPi * x / drift_period_bits + drift_phase);
}

double SpindleWarp::time_at(double x) const {
  double t = x * (1.0 - offset);
  if (drift != 0) {
    const double p = drift_period_bits;
    t += drift * p / kTwoPi * (std::cos(kTwoPi * x / p + drift_phase) - std::cos(drift_phase));
  }
  return t;
}

double SpindleWarp::position_at(double t) const {
  double x = t / (1.0 - offset);
  if (drift == 0) return x;
  for (int i = 0; i < 6; ++i) {  // |eps| << 1: Newton converges in two or three steps
    const double step = (time_at(x) - t) / local_period(x);
    x -= step;
    if (std::abs(step) < 1e-12) break;
  }
  return x;
}

// ---- written track ------------------------------------------------------------------------

WrittenTrack write_track(std::span<const uint8_t> bits, const MediaNoise& noise, uint64_t media_seed,
                         int initial_level) {
  if (bits.empty()) throw_usage("track", "no channel bits to render");
  if (initial_level != -1 && initial_level != 1) throw_usage("track", "initial level must be -1 or +1");
  if (noise.jitter_bits < 0 || noise.width_sigma < 0)
    throw_usage("channel", "jitter and width variation must not be negative");
  WrittenTrack w;
  w.bits_per_track = bits.size();
  RandomStream rng(media_seed);
  int level = initial_level;  // written level before bit 0
  for (size_t n = 0; n < bits.size(); ++n) {
    if (bits[n] > 1) throw_usage("track", "channel bit " + std::to_string(n) + " is not 0 or 1");
    if (!bits[n]) continue;
    // Both deviates are drawn for every transition so the jitter of transition k does not
    // depend on whether width variation is enabled.
    const double dj = rng.gaussian();
    const double dw = rng.gaussian();
    level = -level;
    w.position.push_back(static_cast<double>(n) + noise.jitter_bits * dj);
    w.polarity.push_back(static_cast<int8_t>(level));
    w.width_factor.push_back(static_cast<float>(std::max(0.2, 1.0 + noise.width_sigma * dw)));
  }
  if (level != initial_level) {
    // The level at the end of the track differs from the level at the index: the write
    // splice is one more transition, back to the initial level, half a bit before the index.
    w.position.push_back(static_cast<double>(bits.size()) - 0.5);
    w.polarity.push_back(static_cast<int8_t>(initial_level));
    w.width_factor.push_back(1.0f);
    w.has_splice = true;
  }
  return w;
}

// ---- renderer -----------------------------------------------------------------------------

Renderer::Renderer(const RenderConfig& cfg, const WrittenTrack& track, const WrittenTrack* neighbour)
    : cfg_(cfg), track_(&track), neighbour_(neighbour), noise_rng_(cfg.noise_seed),
      aux_rng_(cfg.aux_seed), digitizer_(cfg.digitizer) {
  auto bad = [](const std::string& key, const std::string& what) { throw_usage(key, what); };
  if (!(cfg.density >= 0.3 && cfg.density <= 8)) bad("channel.density", "density must lie in 0.3..8 bit periods");
  if (!(cfg.span_widths >= 2 && cfg.span_widths <= 100)) bad("channel.span", "span must lie in 2..100 widths");
  if (!(cfg.samples_per_bit >= 1.0 && cfg.samples_per_bit <= 16))
    bad("capture.samples_per_bit", "samples per bit must lie in 1..16");
  if (!(cfg.amplitude > 0)) bad("channel.amplitude", "amplitude must be positive");
  if (cfg.lead_bits < 0 || cfg.tail_bits < 0) bad("capture.lead_bits", "lead and tail must not be negative");
  if (!(cfg.sampling_phase >= 0 && cfg.sampling_phase < 1)) bad("capture", "sampling phase must lie in [0, 1)");
  if (std::abs(cfg.spindle.offset) + std::abs(cfg.spindle.drift) > 0.01)
    bad("spindle", "speed offset plus drift must stay within 10000 ppm");
  if (cfg.spindle.drift != 0 && !(cfg.spindle.drift_period_bits > 0))
    bad("spindle.drift_period", "drift period must be positive");
  if (cfg.offtrack_fraction < 0 || cfg.offtrack_fraction > 1) bad("offtrack.fraction", "fraction must lie in 0..1");
  if (cfg.offtrack_fraction > 0 && !neighbour) bad("offtrack", "no neighbouring track given");
  if (cfg.front_end.mr_asymmetry < -0.5 || cfg.front_end.mr_asymmetry > 0.5)
    bad("channel.mr_asymmetry", "asymmetry must lie in -0.5..0.5");

  const double Lt = static_cast<double>(track.bits_per_track);
  if (cfg.lead_bits > Lt || cfg.tail_bits > Lt)
    bad("capture.lead_bits", "lead and tail must not exceed one revolution (" + std::to_string(track.bits_per_track) + " bits)");
  if (neighbour && neighbour->bits_per_track != track.bits_per_track)
    bad("offtrack", "the neighbouring track has a different length");
  width_ = cfg.density;
  window_ = cfg.span_widths * cfg.density;
  dt_ = 1.0 / cfg.samples_per_bit;
  const double L = static_cast<double>(track.bits_per_track);
  t_start_ = cfg.spindle.time_at(-cfg.lead_bits);
  const double t_end = cfg.spindle.time_at(L + cfg.tail_bits);
  total_samples_ = static_cast<size_t>(std::floor((t_end - t_start_) / dt_ - cfg.sampling_phase)) + 1;

  if (cfg.noise.snr_db) {
    const double sigma_n = cfg.amplitude * std::pow(10.0, -*cfg.noise.snr_db / 20.0);
    sigma_w_ = sigma_n * std::sqrt(cfg.samples_per_bit);  // sigma_n^2 fs T, fs T = samples per bit
  }
  build_transitions(track, main_);
  if (cfg.offtrack_fraction > 0) build_transitions(*neighbour, nb_);

  // Spans and events in time, repeated every revolution across the capture window.
  // Lead and tail are at most one revolution, so copies q = -2..2 cover the window.
  auto add_interval = [&](std::vector<TimeInterval>& v, double x0, double len, size_t i, bool nb) {
    for (int q = -2; q <= 2; ++q) {
      const double a = x0 + q * L, b = a + len;
      if (b < -cfg.lead_bits - window_ || a > L + cfg.tail_bits + window_) continue;
      v.push_back({cfg.spindle.time_at(a), cfg.spindle.time_at(b), i, nb});
    }
  };
  for (size_t i = 0; i < cfg.dropouts.size(); ++i) {
    const auto& d = cfg.dropouts[i];
    if (d.length_bits <= 0 || d.depth < 0 || d.depth > 1 || d.edge_bits < 0 || 2 * d.edge_bits > d.length_bits)
      bad("damage.scratch", "dropout needs length > 0, depth in 0..1 and edges within half its length");
    add_interval(dropout_times_, d.start_bit, d.length_bits, i, false);
  }
  for (size_t i = 0; i < cfg.neighbour_dropouts.size(); ++i)
    add_interval(dropout_times_, cfg.neighbour_dropouts[i].start_bit, cfg.neighbour_dropouts[i].length_bits, i, true);
  for (size_t i = 0; i < cfg.defects.size(); ++i) {
    if (cfg.defects[i].length_bits <= 0 || cfg.defects[i].noise_rms < 0)
      bad("damage.defect", "defect needs length > 0 and noise rms >= 0");
    add_interval(defect_times_, cfg.defects[i].start_bit, cfg.defects[i].length_bits, i, false);
  }
  for (size_t i = 0; i < cfg.asperities.size(); ++i) {
    const auto& a = cfg.asperities[i];
    if (!(a.decay_bits > 0) || a.rise_bits < 0) bad("damage.thermal_asperity", "decay must be positive, rise not negative");
    for (int q = -2; q <= 2; ++q) {
      asperity_times_.push_back(cfg.spindle.time_at(a.position_bit + q * L));
      asperity_index_.push_back(i);
    }
  }
  if (cfg.front_end.lowpass_order > 0) {
    if (!(cfg.front_end.lowpass_corner_rel > 0 && cfg.front_end.lowpass_corner_rel < 0.49 * cfg.samples_per_bit))
      bad("channel.lowpass.corner", "corner " + std::to_string(cfg.front_end.lowpass_corner_rel) +
                                        " x bit rate must lie below 0.49 x the sample rate (" +
                                        std::to_string(0.49 * cfg.samples_per_bit) + " x bit rate)");
    // Frequencies in units of the nominal bit rate: the design depends only on the ratio.
    lowpass_.emplace(ButterworthConfig{cfg.front_end.lowpass_order, cfg.front_end.lowpass_corner_rel,
                                       cfg.samples_per_bit});
  }
  if (cfg.front_end.wander == WanderKind::sine && !(cfg.front_end.wander_period_bits > 0))
    bad("channel.baseline_wander.period_bits", "period must be positive");
  if (cfg.front_end.wander == WanderKind::random &&
      !(cfg.front_end.wander_corner_rel > 0 && cfg.front_end.wander_corner_rel < 0.1))
    bad("channel.baseline_wander.corner", "corner must lie in (0, 0.1) of the bit rate");
  reset();
}

void Renderer::build_transitions(const WrittenTrack& w, TimedTransitions& out) const {
  const double L = static_cast<double>(w.bits_per_track);
  const double x_lo = -cfg_.lead_bits - window_ * 1.1 - 2;
  const double x_hi = L + cfg_.tail_bits + window_ * 1.1 + 2;
  struct Item { double t; double amp; double wf; };
  std::vector<Item> items;
  for (int q = static_cast<int>(std::floor(x_lo / L)); q * L <= x_hi; ++q) {
    for (size_t k = 0; k < w.position.size(); ++k) {
      const double x = w.position[k] + q * L;
      if (x < x_lo || x > x_hi) continue;
      items.push_back({cfg_.spindle.time_at(x), w.polarity[k] * cfg_.amplitude, w.width_factor[k]});
    }
  }
  // Jitter may swap two close transitions; the window needs them in time order.
  std::stable_sort(items.begin(), items.end(), [](const Item& a, const Item& b) { return a.t < b.t; });
  out = TimedTransitions{};
  out.time.reserve(items.size());
  for (const Item& it : items) {
    out.time.push_back(it.t);
    out.amp.push_back(it.amp);
    const double wk = width_ * it.wf;
    out.half_w2.push_back(cfg_.model == PulseModel::lorentzian ? 0.25 * wk * wk : kErfScale / wk);
  }
  // erf: the level before the first transition is the opposite of its polarity.
  out.start_level = items.empty() ? -cfg_.amplitude : -items.front().amp;
}

double Renderer::time_of_sample(double i) const { return t_start_ + (i + cfg_.sampling_phase) * dt_; }

double Renderer::lowpass_group_delay_bits() const {
  return lowpass_ ? lowpass_->group_delay_samples(0.0) / cfg_.samples_per_bit : 0.0;
}

double Renderer::index_sample() const { return (0.0 - t_start_) / dt_ - cfg_.sampling_phase; }

void Renderer::reset() {
  next_sample_ = 0;
  clipped_ = 0;
  noise_rng_.reseed(cfg_.noise_seed);
  aux_rng_.reseed(cfg_.aux_seed);
  for (TimedTransitions* tr : {&main_, &nb_}) {
    tr->lo = tr->hi = 0;
    tr->passed_level = tr->start_level;
  }
  wander_phase_ = kTwoPi * aux_rng_.uniform();
  wander_a_ = 0;
  wander_state_ = 0;
  if (cfg_.front_end.wander == WanderKind::random) {
    wander_a_ = std::exp(-kTwoPi * cfg_.front_end.wander_corner_rel / cfg_.samples_per_bit);
    wander_state_ = cfg_.front_end.wander_amplitude * aux_rng_.gaussian();  // start stationary
  }
  if (lowpass_) lowpass_->reset();
}

double Renderer::head_signal(TimedTransitions& tr, double t) const {
  const size_t n = tr.time.size();
  // Advance the window [lo, hi) to the transitions with |t - t_k| <= window_.
  while (tr.hi < n && tr.time[tr.hi] <= t + window_) ++tr.hi;
  while (tr.lo < tr.hi && tr.time[tr.lo] < t - window_) {
    tr.passed_level += 2.0 * tr.amp[tr.lo];
    ++tr.lo;
  }
  double sum = 0;
  if (cfg_.model == PulseModel::lorentzian) {
    for (size_t k = tr.lo; k < tr.hi; ++k) {
      const double d = t - tr.time[k];
      sum += tr.amp[k] * tr.half_w2[k] / (tr.half_w2[k] + d * d);
    }
    return sum;
  }
  // erf: r(t) = level before all + sum_k b_k (s(t - t_k) + 1); transitions before the window
  // contribute 2 b_k exactly (their erf tail is below erfc(2 sqrt(ln2) span)).
  sum = tr.passed_level;
  for (size_t k = tr.lo; k < tr.hi; ++k) {
    sum += tr.amp[k] * (std::erf(tr.half_w2[k] * (t - tr.time[k])) + 1.0);
  }
  return sum;
}

double Renderer::envelope(const std::vector<AmplitudeDropout>& d, double x) const {
  const double L = static_cast<double>(track_->bits_per_track);
  double env = 1.0;
  for (const AmplitudeDropout& a : d) {
    for (int q = -2; q <= 2; ++q) {
      const double u = x - (a.start_bit + q * L);
      if (u < 0 || u > a.length_bits) continue;
      const double w = std::min(ramp(u, a.edge_bits), ramp(a.length_bits - u, a.edge_bits));
      env *= 1.0 - a.depth * w;
    }
  }
  return env;
}

void Renderer::render_block(std::span<double> out) {
  const FrontEnd& fe = cfg_.front_end;
  const bool has_nb = cfg_.offtrack_fraction > 0;
  for (size_t i = 0; i < out.size(); ++i) {
    const double t = time_of_sample(static_cast<double>(next_sample_ + i));
    double head = head_signal(main_, t);
    double nb = has_nb ? head_signal(nb_, t) : 0.0;
    // Amplitude envelopes (scratch, defect) need the bit position under the head.
    bool need_x = false, in_defect = false;
    for (const TimeInterval& iv : dropout_times_) need_x |= (t >= iv.t0 && t <= iv.t1);
    for (const TimeInterval& iv : defect_times_) in_defect |= (t >= iv.t0 && t <= iv.t1);
    if (need_x || in_defect) {
      const double x = cfg_.spindle.position_at(t);
      head *= envelope(cfg_.dropouts, x);
      nb *= envelope(cfg_.neighbour_dropouts, x);
    }
    double y = head + cfg_.offtrack_fraction * nb;
    y += fe.mr_asymmetry * y * y;
    for (size_t j = 0; j < asperity_times_.size(); ++j) {
      const double u = t - asperity_times_[j];
      if (u < 0) continue;
      const ThermalAsperity& a = cfg_.asperities[asperity_index_[j]];
      if (u < a.rise_bits) y += a.amplitude * u / a.rise_bits;
      else if (u < a.rise_bits + 40 * a.decay_bits) y += a.amplitude * std::exp(-(u - a.rise_bits) / a.decay_bits);
    }
    if (in_defect) {
      for (const TimeInterval& iv : defect_times_) {
        if (t >= iv.t0 && t <= iv.t1) {
          y = cfg_.defects[iv.index].noise_rms * aux_rng_.gaussian();  // nothing written survives
          break;
        }
      }
    }
    if (sigma_w_ > 0) y += sigma_w_ * noise_rng_.gaussian();
    y += fe.dc_offset;
    if (fe.wander == WanderKind::sine) {
      y += fe.wander_amplitude * std::sin(kTwoPi * t / fe.wander_period_bits + wander_phase_);
    } else if (fe.wander == WanderKind::random) {
      wander_state_ = wander_a_ * wander_state_ +
                      std::sqrt(1.0 - wander_a_ * wander_a_) * fe.wander_amplitude * aux_rng_.gaussian();
      y += wander_state_;
    }
    out[i] = y;
  }
  if (lowpass_) lowpass_->process(out);
}

Progress Renderer::process_analog(std::span<double> out) {
  const size_t n = std::min(out.size(), total_samples_ - next_sample_);
  render_block(out.first(n));
  next_sample_ += n;
  return {0, n};
}

Progress Renderer::process(std::span<float> out) {
  const size_t n = std::min(out.size(), total_samples_ - next_sample_);
  if (work_.size() < n) work_.resize(n);
  std::span<double> w(work_.data(), n);
  render_block(w);
  next_sample_ += n;
  clipped_ += digitizer_.process(w, out.first(n));
  return {0, n};
}

std::string Renderer::describe() const {
  std::ostringstream o;
  o << to_string(cfg_.model) << " density " << cfg_.density << " T, span " << cfg_.span_widths
    << " widths, " << cfg_.samples_per_bit << " samples/bit, "
    << (cfg_.noise.snr_db ? "SNR " + std::to_string(*cfg_.noise.snr_db) + " dB" : std::string("no noise"))
    << ", " << total_samples_ << " samples, " << main_.time.size() << " transitions";
  return o.str();
}

}  // namespace salvor::synth
