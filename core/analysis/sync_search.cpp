#include "analysis/sync_search.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <limits>

#include "common/error.hpp"
#include "timing/prefilter.hpp"

namespace salvor::analysis {

double lorentzian_readback(const std::vector<int>& tr, int first_bit, double pw50, double x) {
  // Transitions further than 24 PW50 away contribute below 1/2300 of the peak each and
  // alternate in sign; they are left out (common practice, no source).
  const double reach = 24.0 * pw50;
  const long lo = std::max(0L, long(std::floor(x - reach)) - first_bit);
  const long hi = std::min(long(tr.size()), long(std::ceil(x + reach)) - first_bit + 1);
  double acc = 0;
  for (long i = lo; i < hi; ++i) {
    if (tr[size_t(i)]) acc += tr[size_t(i)] * timing::lorentzian_transition(x - double(first_bit + i), pw50);
  }
  return acc;
}

SyncSearch::SyncSearch(const SyncSearchConfig& cfg) : cfg_(cfg) {
  auto bad = [](const std::string& field, const std::string& what) { throw_usage("sync search: " + field, what); };
  if (cfg.sync_mark.size() < 8 || cfg.sync_mark.size() > 256) bad("sync_mark", "length " + std::to_string(cfg.sync_mark.size()) + " must be 8..256 bits");
  for (uint8_t b : cfg.sync_mark)
    if (b > 1) bad("sync_mark", "bits must be 0 or 1");
  if (cfg.preamble_bits < 16) bad("preamble_bits", "value " + std::to_string(cfg.preamble_bits) + " must be at least 16");
  if (cfg.template_preamble_bits < 0 || cfg.template_preamble_bits > cfg.preamble_bits)
    bad("template_preamble_bits", "must be within the preamble");
  if (cfg.fit_preamble_bits < 4 || cfg.fit_preamble_bits > cfg.preamble_bits)
    bad("fit_preamble_bits", "must be within the preamble and at least 4");
  if (cfg.fit_exclude_tail_bits < 0 || cfg.fit_exclude_tail_bits >= int(cfg.sync_mark.size()))
    bad("fit_exclude_tail_bits", "must be shorter than the sync mark");
  if (!(cfg.threshold > 0.3 && cfg.threshold < 1.0)) bad("threshold", "value " + std::to_string(cfg.threshold) + " must be in (0.3, 1)");
  if (!(cfg.pw50_bits > 0.2 && cfg.pw50_bits < 8)) bad("pw50_bits", "value " + std::to_string(cfg.pw50_bits) + " must be in (0.2, 8)");
  if (!cfg.layout_sync_bits.empty() && cfg.bits_per_track == 0) bad("bits_per_track", "needed with a layout");

  // Known transitions: preamble channel bits are 0,1,0,1,... (bit i is 1 for odd i), then
  // the sync mark; NRZI: each 1 reverses the level, so transition signs alternate.
  const int n_known = cfg.preamble_bits + int(cfg.sync_mark.size());
  transitions_.assign(size_t(n_known), 0);
  int sign = 1;
  for (int i = 0; i < n_known; ++i) {
    const bool one = i < cfg.preamble_bits ? (i & 1) : cfg.sync_mark[size_t(i - cfg.preamble_bits)];
    if (one) {
      transitions_[size_t(i)] = sign;
      sign = -sign;
    }
  }
  // Template over bit offsets -template_preamble_bits .. sync length - 1.
  const int len = cfg.template_preamble_bits + int(cfg.sync_mark.size());
  template_.resize(size_t(len));
  template_energy_ = 0;
  for (int k = 0; k < len; ++k) {
    template_[size_t(k)] = lorentzian_readback(transitions_, -cfg.preamble_bits, cfg.pw50_bits,
                                               double(k - cfg.template_preamble_bits));
    template_energy_ += template_[size_t(k)] * template_[size_t(k)];
  }
  if (cfg.preamble_window < 8 || cfg.preamble_window > 256 || cfg.preamble_window % 4 != 0)
    bad("preamble_window", "value " + std::to_string(cfg.preamble_window) + " must be a multiple of 4 in [8, 256]");
  const size_t ring = size_t(std::max({len, cfg.fit_preamble_bits + int(cfg.sync_mark.size()), cfg.preamble_window}) + 16);
  ring_.assign(ring, {});
  reset();
}

void SyncSearch::reset() {
  count_ = 0;
  pending_ = false;
  pending_bit_ = 0;
  pending_rho_ = 0;
  hits_.clear();
  preambles_.clear();
  preambles_total_ = 0;
  tone_run_ = 0;
  rate_sum_ = 0;
  rate_n_ = 0;
  windows_.clear();
  hits_total_ = slips_total_ = slip_events_ = 0;
  have_last_ = false;
  last_hit_bit_ = 0;
}

std::string SyncSearch::describe() const {
  char buf[256];
  std::snprintf(buf, sizeof buf,
                "sync search: %zu-bit sync mark after %d preamble bits, Lorentzian template at PW50 %.2f bits, "
                "threshold %.2f",
                cfg_.sync_mark.size(), cfg_.template_preamble_bits, cfg_.pw50_bits, cfg_.threshold);
  return buf;
}

const timing::BitSample& SyncSearch::at(uint64_t bit) const { return ring_[size_t(bit % ring_.size())]; }

void SyncSearch::process(std::span<const timing::BitSample> in) {
  const size_t len = template_.size();
  const size_t sync_len = cfg_.sync_mark.size();
  for (const auto& b : in) {
    ring_[size_t(count_ % ring_.size())] = b;
    const uint64_t bit = count_++;
    if (b.state == timing::TimingState::track) rate_sum_ += b.rate_offset, ++rate_n_;
    // finalise a candidate 3 bits after its peak
    if (pending_ && bit >= pending_bit_ + 3) {
      finalize(pending_bit_);
      pending_ = false;
    }
    // preamble: energy fraction of the 1/(4T) bin over the last preamble_window bits
    const size_t pw = size_t(cfg_.preamble_window);
    if (count_ >= pw) {
      double re = 0, im = 0, en = 0;
      for (size_t k = 0; k < pw; ++k) {
        const double y = at(bit + 1 - pw + k).value;
        en += y * y;
        switch (k % 4) {
          case 0: re += y; break;
          case 1: im -= y; break;
          case 2: re -= y; break;
          default: im += y; break;
        }
      }
      const double ratio = en > 0 ? (re * re + im * im) / (en * double(pw) / 2) : 0;
      // A preamble is counted once the line has held for another window (a run of at
      // least two windows of tone), so the short 2T postamble is not taken for one.
      if (ratio > cfg_.preamble_threshold) {
        if (++tone_run_ == pw) {
          ++preambles_total_;
          if (preambles_.size() >= cfg_.max_hits) preambles_.pop_front();
          const uint64_t first = bit + 2 - 2 * pw;
          preambles_.push_back({first, at(first).position});
        }
      } else if (ratio < 0.5 * cfg_.preamble_threshold) {
        tone_run_ = 0;
      }
    }
    if (count_ < len) continue;
    double sxy = 0, syy = 0;
    for (size_t k = 0; k < len; ++k) {
      const double y = at(bit + 1 - len + k).value;
      sxy += y * template_[k];
      syy += y * y;
    }
    if (syy <= 0) continue;
    const double rho = sxy / std::sqrt(syy * template_energy_);
    if (std::fabs(rho) >= cfg_.threshold && (!pending_ || std::fabs(rho) > std::fabs(pending_rho_))) {
      // never closer to the previous hit than one sync mark
      if (!have_last_ || bit >= last_hit_bit_ + sync_len) {
        pending_ = true;
        pending_bit_ = bit;
        pending_rho_ = rho;
      }
    }
  }
}

void SyncSearch::finalize(uint64_t end_bit) {
  const size_t sync_len = cfg_.sync_mark.size();
  const uint64_t sync_start = end_bit + 1 - sync_len;
  SyncHit h;
  h.bit = sync_start;
  h.position = at(sync_start).position;
  h.correlation = std::fabs(pending_rho_);
  h.polarity = pending_rho_ >= 0 ? 1 : -1;
  // lock status over the sync mark, mean frequency over the whole template window
  const uint64_t first = end_bit + 1 - template_.size();
  bool locked = true;
  double rate = 0;
  for (uint64_t k = first; k <= end_bit; ++k) {
    if (k >= sync_start) locked = locked && at(k).state == timing::TimingState::track;
    rate += at(k).rate_offset;
  }
  h.locked = locked;
  // mean over the tracked bits since the previous hit (the sector before), else the window
  const bool over_sector = have_last_ && rate_n_ > 0;
  h.rate_offset = over_sector ? rate_sum_ / double(rate_n_) : rate / double(end_bit + 1 - first);
  h.rate_bits = over_sector ? rate_n_ : 0;
  rate_sum_ = 0;
  rate_n_ = 0;
  // slip check against the layout
  if (have_last_ && !cfg_.layout_sync_bits.empty()) {
    const long delta = long(sync_start - last_hit_bit_);
    const auto& s = cfg_.layout_sync_bits;
    const long bpt = long(cfg_.bits_per_track);
    long best = std::numeric_limits<long>::max();
    for (size_t i = 0; i < s.size(); ++i) {
      for (size_t j = 0; j < s.size(); ++j) {
        long d = long(s[j]) - long(s[i]);
        if (d <= 0) d += bpt;
        if (std::labs(delta - d) < std::labs(best)) best = delta - d;
      }
    }
    if (best != 0 && std::labs(best) <= cfg_.slip_tolerance) {
      h.slip_bits = best;
      slips_total_ += uint64_t(std::labs(best));
      ++slip_events_;
    }
  }
  have_last_ = true;
  last_hit_bit_ = sync_start;
  ++hits_total_;
  if (hits_.size() >= cfg_.max_hits) hits_.pop_front();
  hits_.push_back(h);
  // fit window: only from a locked loop
  if (locked && windows_.size() < cfg_.max_fit_windows) {
    FitWindow w;
    w.first_bit = -cfg_.fit_preamble_bits;
    const uint64_t b0 = sync_start - uint64_t(cfg_.fit_preamble_bits);
    const uint64_t b1 = sync_start + sync_len - uint64_t(cfg_.fit_exclude_tail_bits);
    bool ok = true;
    for (uint64_t k = b0; k < b1; ++k) ok = ok && at(k).state == timing::TimingState::track;
    if (ok && count_ - b0 <= ring_.size()) {
      for (uint64_t k = b0; k < b1; ++k) {
        w.samples.push_back(at(k).midpoint);
        w.samples.push_back(at(k).value);
      }
      windows_.push_back(std::move(w));
    }
  }
}

void SyncSearch::drain_preambles(std::vector<PreambleHit>& dst) {
  dst.insert(dst.end(), preambles_.begin(), preambles_.end());
  preambles_.clear();
}

void SyncSearch::drain_hits(std::vector<SyncHit>& dst) {
  dst.insert(dst.end(), hits_.begin(), hits_.end());
  hits_.clear();
}

}  // namespace salvor::analysis
