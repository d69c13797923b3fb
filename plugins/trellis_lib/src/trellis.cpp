#include "trellis/trellis.hpp"

#include <algorithm>
#include <cmath>
#include <functional>
#include <queue>
#include <sstream>

#include "common/error.hpp"

namespace salvor::trellis {

namespace {

void validate_target(std::span<const double> target) {
  if (target.empty() || target.size() > static_cast<size_t>(kMaxTaps))
    throw_usage("target", "length " + std::to_string(target.size()) + " is outside 1.." +
                              std::to_string(kMaxTaps));
  bool any = false;
  for (size_t i = 0; i < target.size(); ++i) {
    if (!std::isfinite(target[i]))
      throw_usage("target", "tap " + std::to_string(i) + " is not a finite number");
    any = any || target[i] != 0.0;
  }
  if (!any) throw_usage("target", "all taps are zero");
}

// Error-event memory: the target's own memory (at least 1).
int event_memory(std::span<const double> target) {
  return std::max<int>(1, static_cast<int>(target.size()) - 1);
}

}  // namespace

Trellis::Trellis(std::span<const double> target, int min_memory) {
  validate_target(target);
  if (min_memory < 1 || min_memory > kMaxMemory)
    throw_usage("trellis memory", "requested memory " + std::to_string(min_memory) +
                                      " is outside 1.." + std::to_string(kMaxMemory));
  taps_.assign(target.begin(), target.end());
  memory_ = std::max<int>(min_memory, static_cast<int>(taps_.size()) - 1);
  states_ = 1 << memory_;
  for (int j = 0; j < 2; ++j) {
    pred_[j].resize(states_);
    out_[j].resize(states_);
    nrzi_[j].resize(states_);
    out_index_[j].resize(states_);
  }
  for (int j = 0; j < 2; ++j) {
    for (int s = 0; s < states_; ++s) {
      const int p = (s >> 1) | (j << (memory_ - 1));
      const int word = s | (j << memory_);  // bit i = level x_(k-i), i = 0..memory
      double y = 0.0;
      for (size_t i = 0; i < taps_.size(); ++i) y += taps_[i] * level_of(word, static_cast<int>(i));
      pred_[j][s] = static_cast<uint8_t>(p);
      out_[j][s] = y;
      nrzi_[j][s] = static_cast<uint8_t>((word & 1) ^ ((word >> 1) & 1));
    }
  }
  // Distinct noiseless outputs (exact comparison is right: equal sums of the same taps
  // in the same order give bit-identical doubles; near-equal values stay separate).
  for (int j = 0; j < 2; ++j)
    for (int s = 0; s < states_; ++s) {
      auto it = std::find(distinct_.begin(), distinct_.end(), out_[j][s]);
      if (it == distinct_.end()) {
        distinct_.push_back(out_[j][s]);
        it = distinct_.end() - 1;
      }
      out_index_[j][s] = static_cast<uint8_t>(it - distinct_.begin());
    }
}

std::string Trellis::describe() const {
  std::ostringstream o;
  o << "trellis target [";
  for (size_t i = 0; i < taps_.size(); ++i) o << (i ? ", " : "") << taps_[i];
  o << "], memory " << memory_ << ", " << states_ << " states, " << distinct_.size()
    << " distinct branch outputs";
  return o.str();
}

// ---- error events ----

double min_squared_distance(std::span<const double> target) {
  validate_target(target);
  const int m = event_memory(target);
  const int L = static_cast<int>(target.size());
  // Error state: the last m errors, base-3 digits (0 -> 0, 1 -> +1, 2 -> -1), newest first.
  int n_states = 1;
  for (int i = 0; i < m; ++i) n_states *= 3;
  auto digit_value = [](int d) { return d == 0 ? 0 : (d == 1 ? 1 : -1); };
  auto step_cost = [&](int state, int new_digit, int* next) {
    int digits[kMaxTaps + 1];
    digits[0] = new_digit;
    int t = state;
    for (int i = 1; i <= m; ++i) {
      digits[i] = t % 3;
      t /= 3;
    }
    double v = 0.0;
    for (int i = 0; i < L; ++i) v += target[i] * digit_value(digits[i]);
    int ns = 0;
    for (int i = m - 1; i >= 0; --i) ns = ns * 3 + digits[i];
    *next = ns;
    return v * v;
  };
  // Dijkstra from "first error just made" back to the all-zero error state.
  std::vector<double> dist(n_states, INFINITY);
  using Item = std::pair<double, int>;
  std::priority_queue<Item, std::vector<Item>, std::greater<Item>> queue;
  for (int first = 1; first <= 2; ++first) {
    int ns;
    double c = step_cost(0, first, &ns);
    if (c < dist[ns]) {
      dist[ns] = c;
      queue.push({c, ns});
    }
  }
  while (!queue.empty()) {
    auto [d, s] = queue.top();
    queue.pop();
    if (d > dist[s]) continue;
    if (s == 0) return d;
    for (int dig = 0; dig < 3; ++dig) {
      int ns;
      double c = d + step_cost(s, dig, &ns);
      if (c < dist[ns]) {
        dist[ns] = c;
        queue.push({c, ns});
      }
    }
  }
  throw_internal("error-event search found no path back to the zero state");
}

std::vector<ErrorEvent> error_events(std::span<const double> target, double d2_max, int max_len) {
  validate_target(target);
  const int m = event_memory(target);
  const int L = static_cast<int>(target.size());
  std::vector<ErrorEvent> found;
  std::vector<int8_t> e;
  // Distance accumulated over output positions fully determined so far; the tail
  // (outputs after the last error) is added when the event is closed.
  std::function<void(double, int)> grow = [&](double partial, int zeros_run) {
    const int n = static_cast<int>(e.size());
    if (e.back() != 0) {
      // Close the event here: add the L-1 tail outputs.
      double tail = 0.0;
      for (int k = n; k < n + L - 1; ++k) {
        double v = 0.0;
        for (int i = 0; i < L; ++i) {
          int idx = k - i;
          if (idx >= 0 && idx < n) v += target[i] * e[idx];
        }
        tail += v * v;
      }
      if (partial + tail <= d2_max + 1e-9) {
        ErrorEvent ev;
        ev.e = e;
        ev.d2 = partial + tail;
        for (int k = 0; k < n; ++k) {
          ev.level_errors += e[k] != 0;
          const bool here = e[k] != 0, before = k > 0 && e[k - 1] != 0;
          ev.nrzi_errors += here != before;
        }
        ev.nrzi_errors += 1;  // the NRZI bit after the last level error
        found.push_back(std::move(ev));
      }
    }
    if (n >= max_len) return;
    for (int v : {0, 1, -1}) {
      if (v == 0 && zeros_run + 1 >= m) continue;  // m zeros would end the event
      e.push_back(static_cast<int8_t>(v));
      double out = 0.0;
      for (int i = 0; i < L; ++i) {
        int idx = n - i;
        if (idx >= 0) out += target[i] * e[idx];
      }
      double next = partial + out * out;
      if (next <= d2_max + 1e-9) grow(next, v == 0 ? zeros_run + 1 : 0);
      e.pop_back();
    }
  };
  for (int first : {1, -1}) {
    e.assign(1, static_cast<int8_t>(first));
    grow(target[0] * target[0], 0);
  }
  return found;
}

Multiplicity union_bound_multiplicity(std::span<const double> target, int max_len) {
  Multiplicity mult;
  mult.d2min = min_squared_distance(target);
  for (const ErrorEvent& ev : error_events(target, mult.d2min, max_len)) {
    if (std::abs(ev.d2 - mult.d2min) > 1e-9) continue;
    const double support = std::ldexp(1.0, -ev.level_errors);  // data must allow the event
    mult.level += ev.level_errors * support;
    mult.nrzi += ev.nrzi_errors * support;
  }
  return mult;
}

}  // namespace salvor::trellis
