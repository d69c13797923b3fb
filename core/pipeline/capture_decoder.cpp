#include "pipeline/capture_decoder.hpp"
#include "pipeline/sector_decode.hpp"

#include <algorithm>
#include <cmath>
#include <deque>
#include <map>
#include <set>
#include <numeric>
#include <condition_variable>
#include <exception>
#include <filesystem>
#include <mutex>
#include <thread>
#include <cstdlib>

#include "common/error.hpp"
#include "condition/conditioner.hpp"
#include "detect/detector.hpp"
#include "equalize/equalizer.hpp"
#include "equalize/mmse_target.hpp"
#include "equalize/targets.hpp"
#include "format/rll89.hpp"
#include "format/track_codec.hpp"
#include "format/sync_search.hpp"
#include "resample/resampler.hpp"
#include "results/confidence.hpp"
#include "timing/timing_loop.hpp"

namespace salvor::pipeline {

namespace {

// A bounded queue of bit-sample blocks between the front-end thread and the framer.
// Locked once per block (tens of thousands of bits), never per bit. The consumer hands
// each block back (recycle) so that its buffers are reused: a fresh megabyte per block
// would cost page faults on every one.
class BitBlockQueue {
 public:
  struct Block {
    std::vector<timing::BitSample> bits;
    std::vector<uint8_t> flags;
  };
  explicit BitBlockQueue(size_t capacity) : capacity_(capacity) {}

  // Blocks while the queue is full; returns at once after cancel().
  void push(std::span<const timing::BitSample> bits, std::span<const uint8_t> flags) {
    Block b;
    {
      std::lock_guard<std::mutex> lock(mu_);
      if (!spare_.empty()) {
        b = std::move(spare_.back());
        spare_.pop_back();
      }
    }
    b.bits.assign(bits.begin(), bits.end());
    b.flags.assign(flags.begin(), flags.end());
    std::unique_lock<std::mutex> lock(mu_);
    space_.wait(lock, [&] { return blocks_.size() < capacity_ || cancelled_; });
    if (cancelled_) throw_internal("capture decode: the framer stopped");
    blocks_.push_back(std::move(b));
    ready_.notify_one();
  }
  // The next block; false once the producer closed the queue and it is empty.
  bool pop(Block& out) {
    std::unique_lock<std::mutex> lock(mu_);
    ready_.wait(lock, [&] { return !blocks_.empty() || closed_; });
    if (blocks_.empty()) return false;
    out = std::move(blocks_.front());
    blocks_.pop_front();
    space_.notify_one();
    return true;
  }
  // A block the consumer is done with, for the producer to fill again.
  void recycle(Block&& b) {
    std::lock_guard<std::mutex> lock(mu_);
    if (spare_.size() < capacity_) spare_.push_back(std::move(b));
  }
  void close() {
    std::lock_guard<std::mutex> lock(mu_);
    closed_ = true;
    ready_.notify_all();
  }
  void cancel() {
    std::lock_guard<std::mutex> lock(mu_);
    cancelled_ = true;
    space_.notify_all();
  }

 private:
  std::mutex mu_;
  std::condition_variable ready_, space_;
  std::deque<Block> blocks_;
  std::vector<Block> spare_;
  size_t capacity_;
  bool closed_ = false, cancelled_ = false;
};

using results::SectorAttempt;
using results::SectorStatus;


// T-spaced response of the PLL's samples to one NRZ level under a Lorentzian channel:
// a level change between bits k-1 and k peaks at sample k, so level a_n contributes
// g(m-n) = [h(m-n) - h(m-n-1)] / 2 to sample m (Bergmans 1996: bit response as half the
// dibit). Returned causal, shifted by `lead` samples, and scaled to unit rms for i.i.d.
// levels, which is what the conditioner's AGC delivers.
std::vector<double> model_bit_response(double pw50_bits, int lead, int span) {
  auto h = [&](double x) { return 1.0 / (1.0 + (2.0 * x / pw50_bits) * (2.0 * x / pw50_bits)); };
  std::vector<double> g(static_cast<size_t>(lead + span + 1));
  double energy = 0;
  for (size_t i = 0; i < g.size(); ++i) {
    double j = static_cast<double>(i) - lead;
    g[i] = 0.5 * (h(j) - h(j - 1));
    energy += g[i] * g[i];
  }
  for (double& v : g) v /= std::sqrt(energy);
  return g;
}

// Wiener taps for `target` from the channel model; the model stream lags the real one by
// `lead` samples, so a real delay d is a model delay d + lead.
std::vector<double> initial_taps(const std::vector<double>& target, double pw50_bits, size_t taps,
                                 size_t delay, double snr_db) {
  const int lead = 6;
  std::vector<double> g = model_bit_response(pw50_bits, lead, 12);
  equalize::MmseDesignConfig cfg;
  cfg.equalizer_taps = taps;
  cfg.delay = delay + lead;
  cfg.target_length = std::max<size_t>(target.size(), 2);
  double noise_var = std::pow(10.0, -snr_db / 10.0);
  // The model needs the delay inside the window: widen the design and keep the taps.
  if (cfg.delay >= cfg.equalizer_taps) {
    // Design a longer filter and take the part that maps to the real delay.
    equalize::MmseDesignConfig wide = cfg;
    wide.equalizer_taps = taps + lead;
    auto stats = equalize::channel_statistics(g, noise_var, wide);
    auto sol = equalize::solve_wiener(stats, target, wide);
    return std::vector<double>(sol.taps.begin(), sol.taps.begin() + static_cast<long>(taps));
  }
  auto stats = equalize::channel_statistics(g, noise_var, cfg);
  return equalize::solve_wiener(stats, target, cfg).taps;
}

std::vector<int8_t> levels_from_nrzi(std::span<const uint8_t> bits, int8_t start) {
  std::vector<int8_t> x(bits.size());
  int8_t level = start;
  for (size_t i = 0; i < bits.size(); ++i) {
    // Branch-free: NRZI bits are random, so a branch would mispredict every other bit.
    const int8_t flip = static_cast<int8_t>(-(bits[i] & 1));  // 0 or -1
    level = static_cast<int8_t>((level ^ flip) - flip);       // negated when flip is -1
    x[i] = level;
  }
  return x;
}

double convolve_at(const std::vector<double>& f, std::span<const int8_t> x, size_t k) {
  double s = 0;
  for (size_t m = 0; m < f.size() && m <= k; ++m) s += f[m] * x[k - m];
  return s;
}

// One bit sample as the framer keeps it.
struct RingEntry {
  float value = 0;        // PLL output
  float coarse_y = 0;     // coarse equalizer output
  uint8_t coarse_bit = 0; // coarse detector decision (NRZI)
  uint8_t flag = 0;       // conditioning flags (erasure hint)
  double position = 0;    // capture position (input sample index)
};

// A sync mark as the framer uses it.
struct Hit {
  uint64_t end_bit = 0;  // the bit after the mark's last bit
  int distance = 0;
};

// A sector whose header did not verify: kept for placement at the end of the capture.
struct Deferred {
  SectorAttempt attempt;
  SectorBytes bytes;  // the data as detected, decoded once the address is known
  std::vector<float> eye_samples, eye_ideal;  // for a probe, when it asked for an eye
};

}  // namespace

nlohmann::json CaptureSummary::to_json() const {
  return {{"path", path},
          {"samples", samples},
          {"sample_rate_hz", sample_rate_hz},
          {"bit_rate_hz", bit_rate_hz},
          {"bit_rate_source", bit_rate_source},
          {"cylinder", cylinder},
          {"head", head},
          {"revolution", revolution},
          {"bits", bits},
          {"sync_marks", sync_marks},
          {"truncated_sectors", truncated_sectors},
          {"lock_losses", lock_losses},
          {"cycle_slips", cycle_slips},
          {"rate_offset_ppm", rate_offset_ppm},
          {"clipped_fraction", clipped_fraction},
          {"equalizer_taps", equalizer_taps},
          {"target", target},
          {"target_name", target_name}};
}

CaptureDecoder::CaptureDecoder(const format::TrackFormat& fmt, const detect::PluginHost& host,
                               const DecodeSettings& settings)
    : fmt_(fmt), host_(host), settings_(settings) {
  if (!host_.find(settings_.detector))
    throw_usage("--detector", "no detector plugin named '" + settings_.detector + "' (see salvor plugins)");
  if (!host_.find(settings_.coarse_detector))
    throw_usage("coarse detector", "no detector plugin named '" + settings_.coarse_detector + "'");
  if (settings_.samples_per_bit < 2.0 || settings_.samples_per_bit > 8.0)
    throw_usage("samples_per_bit", "must be within 2..8");
}

namespace {

// Everything that happens after the PLL, for one capture.
class TrackFramer {
 public:
  TrackFramer(const format::TrackFormat& fmt, const detect::PluginHost& host, const DecodeSettings& s,
              const JobCapture& cap, const std::string& capture_name)
      : fmt_(fmt), host_(host), s_(s), capture_name_(capture_name) {
    cylinder_ = cap.cylinder;
    head_ = cap.head;
    revolution_ = cap.revolution.value_or(0);
    layout_ = format::layout_track(fmt);

    // Known channel bits from the preamble start to the end of the sync mark.
    format::SectorHeader h = format::make_sector_header(fmt, 0, 0, 0);
    std::vector<uint8_t> zeros(static_cast<size_t>(fmt.user_bytes), 0);
    std::vector<uint8_t> all = format::encode_sector_bits(fmt, h, zeros);
    known_len_ = static_cast<size_t>(fmt.preamble_bits) + fmt.sync_mark.size();
    known_bits_.assign(all.begin(), all.begin() + static_cast<long>(known_len_));
    header_bits_ = static_cast<size_t>(fmt.header_bytes) * 9;
    data_bits_ = static_cast<size_t>(fmt.coded_bytes) * 9;
    margin_ = 48;
    window_len_ = margin_ + known_len_ + header_bits_ + data_bits_ + static_cast<size_t>(fmt.postamble_bits) + margin_;
    size_t ring_size = 1;  // a power of two, so that a bit's slot is index & mask
    while (ring_size < window_len_ * 2 + 8192) ring_size *= 2;
    ring_.resize(ring_size);
    ring_mask_ = ring_size - 1;

    // Coarse path: fixed Wiener equalizer towards EPR4 and the coarse detector.
    coarse_target_ = equalize::lookup_target("EPR4").taps;
    equalize::EqualizerConfig ec;
    ec.taps = s.equalizer_taps;
    ec.delay = ec.taps / 2;
    ec.target = coarse_target_;
    ec.target_name = "EPR4";
    ec.initial_taps = initial_taps(coarse_target_, s.pw50_bits, ec.taps, ec.delay, s.design_snr_db);
    ec.freeze_after_training = true;
    coarse_eq_ = std::make_unique<equalize::Equalizer>(ec);
    detect::DetectorSetup cs;
    cs.target = coarse_target_;
    // The coarse path uses only the hard decisions (sync search, training levels): skip
    // the reliabilities where the plugin can (the decisions are the same either way).
    for (const auto& p : host.find(s.coarse_detector)->params)
      if (p.key == "reliability") cs.params.push_back({"reliability", "0"});
    coarse_det_ = std::make_unique<detect::Detector>(host.create(s.coarse_detector, cs));

    int tol = s.sync_tolerance >= 0 ? s.sync_tolerance : fmt.sync_tolerance;
    sync_ = std::make_unique<format::SyncSearch>(format::SyncSearchConfig{fmt.sync_mark, tol});

    // Fine path: the detector's target.
    const detect::DetectorInfo* info = host.find(s.detector);
    std::string tname = s.target.empty() ? info->target : s.target;
    fine_spec_ = equalize::lookup_target(tname, s.gpr_length);
    if (fine_spec_.kind == equalize::TargetKind::none) {
      fine_target_.clear();  // the detector wants unequalized samples
    } else if (fine_spec_.kind == equalize::TargetKind::fixed) {
      fine_target_ = fine_spec_.taps;
      make_fine(fine_target_, initial_taps(fine_target_, s.pw50_bits, s.equalizer_taps, s.equalizer_taps / 2,
                                           s.design_snr_db));
    }
    // generalized: designed from the first sector's training data (see design_gpr).
  }

  // Feeds bit samples from the PLL.
  void push(std::span<const timing::BitSample> bits, std::span<const uint8_t> flags) {
    // In blocks much smaller than the ring, so nothing is overwritten before the coarse
    // path and the sector decoder have used it.
    const size_t block = 4096;
    for (size_t off = 0; off < bits.size(); off += block) {
      size_t n = std::min(block, bits.size() - off);
      push_block(bits.subspan(off, n), flags.subspan(off, n));
    }
  }

  void push_block(std::span<const timing::BitSample> bits, std::span<const uint8_t> flags) {
    for (size_t i = 0; i < bits.size(); ++i) {
      RingEntry& e = at(count_);  // a mask, not a division per bit
      e = RingEntry{};
      e.value = bits[i].value;
      e.position = bits[i].position;
      e.flag = flags[i];
      ++count_;
    }
    run_coarse(bits.size());
    decode_ready(false);
  }

  void finish() {
    // Drain the coarse path, then decode every sector whose window we have.
    std::vector<float> out(s_.equalizer_taps + 8);
    size_t n = coarse_eq_->flush(out);
    feed_coarse_detector(std::span<const float>(out.data(), n), true);
    if (auto last = sync_->flush()) add_hit(*last);
    decode_ready(true);
    place_deferred(true);
  }

  std::vector<SectorAttempt> take_results() { return std::move(results_); }
  // Where finished attempts go: to the sink as they are made when one is set (memory
  // then does not grow with the capture), else kept for take_results().
  void set_sink(const SectorSink* sink) { sink_ = sink; }
  uint64_t bits() const { return count_; }
  uint64_t sync_marks() const { return sync_marks_; }
  uint64_t truncated() const { return truncated_; }
  std::vector<double> fine_taps() const { return fine_eq_ ? fine_eq_->taps() : std::vector<double>{}; }
  const std::vector<double>& fine_target() const { return fine_target_; }
  std::string fine_target_name() const { return fine_spec_.name; }

 private:
  const RingEntry& at(uint64_t i) const { return ring_[i & ring_mask_]; }
  RingEntry& at(uint64_t i) { return ring_[i & ring_mask_]; }

  void make_fine(const std::vector<double>& target, std::vector<double> taps) {
    equalize::EqualizerConfig ec;
    ec.taps = s_.equalizer_taps;
    ec.delay = ec.taps / 2;
    ec.target = target;
    ec.target_name = fine_spec_.name;
    ec.initial_taps = std::move(taps);
    ec.normalized = true;
    ec.step_size = s_.equalizer_step;
    fine_eq_ = std::make_unique<equalize::Equalizer>(ec);
    detect::DetectorSetup ds;
    ds.target = target;
    ds.params = s_.detector_params;
    fine_det_ = std::make_unique<detect::Detector>(host_.create(s_.detector, ds));
  }

  void run_coarse(size_t n_new) {
    // Member buffers: a fresh vector per block would be a fresh mapping (and page faults)
    // at these sizes.
    auto& in = coarse_scratch_.in;
    auto& out = coarse_scratch_.out;
    auto& er = coarse_scratch_.er_in;
    in.resize(n_new);
    out.resize(n_new);
    er.resize(n_new);
    for (size_t i = 0; i < n_new; ++i) {
      const RingEntry& e = at(count_ - n_new + i);
      in[i] = e.value;
      er[i] = e.flag != 0;
    }
    Progress p = coarse_eq_->process(in, out, er);
    feed_coarse_detector(std::span<const float>(out.data(), p.produced), false);
  }

  void feed_coarse_detector(std::span<const float> y, bool last) {
    // Equalizer output j lines up with bit sample j.
    for (size_t i = 0; i < y.size(); ++i) at(coarse_y_count_ + i).coarse_y = y[i];
    auto& er = coarse_scratch_.er;
    er.resize(y.size());
    for (size_t i = 0; i < y.size(); ++i) er[i] = at(coarse_y_count_ + i).flag != 0;
    coarse_y_count_ += y.size();
    auto& bits = coarse_scratch_.bits;
    auto& llr = coarse_scratch_.llr;
    bits.resize(coarse_det_->capacity_for(y.size()));
    llr.resize(bits.size());
    size_t nb = coarse_det_->process(y, er, bits, llr);
    store_coarse_bits(std::span<const uint8_t>(bits.data(), nb));
    if (last) {
      std::vector<uint8_t> b2(coarse_det_->max_latency() + 8);
      std::vector<float> l2(b2.size());
      size_t m = coarse_det_->flush(b2, l2);
      store_coarse_bits(std::span<const uint8_t>(b2.data(), m));
    }
  }

  // The framer counts a sync mark by the bit after its end (where the header starts).
  void add_hit(const format::SyncHit& h) { hits_pending_.push_back({h.position + fmt_.sync_mark.size(), h.distance}); }

  void store_coarse_bits(std::span<const uint8_t> b) {
    for (size_t i = 0; i < b.size(); ++i) at(coarse_bit_count_ + i).coarse_bit = b[i];
    coarse_bit_count_ += b.size();
    hit_buf_.resize(64);
    size_t off = 0;
    while (off < b.size()) {
      Progress p = sync_->process(b.subspan(off), hit_buf_);
      off += p.consumed;
      for (size_t i = 0; i < p.produced; ++i) add_hit(hit_buf_[i]);
    }
  }

  // Decodes every pending sync hit whose whole window has arrived.
  void decode_ready(bool at_end) {
    while (!hits_pending_.empty()) {
      const Hit h = hits_pending_.front();
      // Window: [sync_end - known_len - margin, sync_end + header + data + postamble + margin)
      const uint64_t end = h.end_bit;
      if (end < known_len_ + margin_) {  // too close to the start to hold the preamble
        hits_pending_.erase(hits_pending_.begin());
        continue;
      }
      const uint64_t w0 = end - known_len_ - margin_;
      const uint64_t w1 = w0 + window_len_;
      const uint64_t avail = std::min(coarse_bit_count_, count_);
      if (w1 > avail && !at_end) return;  // wait for more
      if (count_ > ring_.size() && w0 < count_ - ring_.size()) {  // fell out of the ring
        hits_pending_.erase(hits_pending_.begin());
        continue;
      }
      hits_pending_.erase(hits_pending_.begin());
      // Two hits inside one sector: the later one is a false alarm in the data.
      if (last_sector_end_ && end < *last_sector_end_) continue;
      if (last_sync_end_) correlation_fallback(*last_sync_end_, end);
      last_sync_end_ = end;
      ++sync_marks_;
      uint64_t w1c = std::min<uint64_t>(w1, avail);
      if (w1c <= end + header_bits_) continue;  // capture ends right after the sync mark
      decode_window(w0, w1c, end, h.distance);
      last_sector_end_ = end + header_bits_ + data_bits_;
    }
  }

  // Sync marks the bit-domain search missed (too many detection errors in the mark): when
  // the distance between two found marks leaves room for a sector, look where the layout
  // puts the next sync mark for the EPR4-shaped coarse samples of the known preamble tail
  // and sync mark (normalised correlation, either polarity), and decode a window there.
  void correlation_fallback(uint64_t prev_end, uint64_t next_end) {
    const uint64_t min_pitch = static_cast<uint64_t>(fmt_.sector_bits + fmt_.gap_bits);
    if (next_end < prev_end + min_pitch + min_pitch / 2) return;
    if (template_.empty()) {
      std::vector<int8_t> lv = levels_from_nrzi(known_bits_, 1);
      const size_t n = std::min<size_t>(64, known_len_);
      for (size_t i = known_len_ - n; i < known_len_; ++i) template_.push_back(convolve_at(coarse_target_, lv, i));
      double e = 0;
      for (double v : template_) e += v * v;
      for (double& v : template_) v /= std::sqrt(e);
      for (size_t k = 1; k < layout_.sectors.size(); ++k)
        pitches_.insert(layout_.sectors[k].sync_bit - layout_.sectors[k - 1].sync_bit);
    }
    uint64_t from = prev_end;
    while (true) {
      double best = 0;
      uint64_t best_p = 0;
      for (uint64_t d : pitches_) {
        for (int64_t off = -24; off <= 24; ++off) {
          const uint64_t p = static_cast<uint64_t>(static_cast<int64_t>(from + d) + off);
          if (p + header_bits_ + data_bits_ + known_len_ > next_end) continue;  // would overlap the next sector
          if (p < template_.size() || (count_ > ring_.size() && p - known_len_ - margin_ < count_ - ring_.size())) continue;
          double c = 0, e = 0;
          for (size_t i = 0; i < template_.size(); ++i) {
            double y = at(p - template_.size() + i).coarse_y;
            c += y * template_[i];
            e += y * y;
          }
          double r = e > 0 ? std::fabs(c) / std::sqrt(e) : 0;
          if (r > best) {
            best = r;
            best_p = p;
          }
        }
      }
      // Common practice, no source: 0.8 of a perfect match keeps false locks in random
      // data rare for a 64-sample template.
      if (best < 0.8) return;
      ++sync_marks_;
      decode_window(best_p - known_len_ - margin_, best_p - known_len_ - margin_ + window_len_, best_p, -1,
                    "sync mark found by correlation on the samples (bit search missed it)");
      from = best_p;
    }
  }

  void design_gpr(std::span<const float> x, std::span<const int8_t> levels, std::span<const uint8_t> er) {
    equalize::MmseDesignConfig cfg;
    cfg.equalizer_taps = s_.equalizer_taps;
    cfg.delay = s_.equalizer_taps / 2;
    cfg.target_length = fine_spec_.length;
    cfg.diagonal_loading = 1e-4;
    equalize::MmseStatistics st(cfg);
    st.accumulate(x, levels, er);
    auto d = equalize::solve_monic_gpr(st.stats(), cfg);
    fine_target_ = d.target;
    make_fine(fine_target_, d.equalizer);
  }

  // late_note: a note that belongs at the end of the attempt's evidence (how its sync mark
  // was found), added just before the attempt leaves (or is deferred).
  void decode_window(uint64_t w0, uint64_t w1, uint64_t sync_end, int sync_distance,
                     const char* late_note = nullptr) {
    const size_t L = static_cast<size_t>(w1 - w0);
    const size_t k0 = margin_;                 // preamble start within the window
    const size_t ks = sync_end - w0;           // first header bit within the window
    // Per-window buffers live in the framer (no allocation and zero fill per sector);
    // every element used below is written first.
    auto& x = scratch_.x;
    auto& cy = scratch_.cy;
    auto& cb = scratch_.cb;
    auto& er = scratch_.er;
    x.resize(L);
    cy.resize(L);
    cb.resize(L);
    er.resize(L);
    for (size_t i = 0; i < L; ++i) {
      const RingEntry& e = at(w0 + i);
      x[i] = e.value;
      cy[i] = e.coarse_y;
      cb[i] = e.coarse_bit;
      er[i] = e.flag != 0;
    }
    // Training levels: known bits where the format fixes them, coarse decisions elsewhere.
    auto& tb = scratch_.tb;
    tb.assign(cb.begin(), cb.end());
    for (size_t i = 0; i < known_len_ && k0 + i < L; ++i) tb[k0 + i] = known_bits_[i];
    std::vector<int8_t> lv = levels_from_nrzi(tb, 1);
    // Polarity: the coarse EPR4 output must correlate positively with EPR4 of the levels.
    double corr = 0;
    for (size_t i = k0; i < std::min(L, k0 + known_len_); ++i) corr += cy[i] * convolve_at(coarse_target_, lv, i);
    const int level_before = corr < 0 ? -1 : 1;
    if (corr < 0)
      for (auto& v : lv) v = static_cast<int8_t>(-v);

    SectorAttempt a;
    a.revolutions = {revolution_};
    a.capture = capture_name_;
    a.capture_position = at(sync_end - 1).position;
    a.detector = s_.detector;
    a.attempt = "decode";
    a.rs_capacity = fmt_.rs.parity_symbols;

    auto& y = scratch_.y;
    y.resize(L);
    if (fine_spec_.kind == equalize::TargetKind::generalized && !fine_eq_) design_gpr(x, lv, er);
    if (fine_eq_) {
      // LMS over the window on the training levels, then equalize with the trained taps.
      // The outputs of the last pass are kept as they were made, while the taps were still
      // adapting: they follow a timing phase or gain that drifts within the sector (after
      // a servo wedge the PLL may still be settling), which frozen taps would not.
      auto& tmp = scratch_.tmp;
      tmp.resize(L + s_.equalizer_taps + 8);
      // With a fixed target every sector starts from the taps designed for the track's
      // channel model rather than from the sector before: a damaged sector cannot hand its
      // misadapted taps on, and the equalizer's start does not depend on what was decoded
      // before. A generalized target is designed from the first window it sees, so there
      // the taps go on adapting from sector to sector and can leave a poor first design.
      if (fine_spec_.kind == equalize::TargetKind::fixed) fine_eq_->reset();
      for (int ep = 0; ep < std::max(1, s_.training_epochs); ++ep) {
        fine_eq_->restart_span();
        Progress p = fine_eq_->train(x, lv, std::span<float>(tmp.data(), L), er);
        size_t f = fine_eq_->flush(std::span<float>(tmp.data() + p.produced, s_.equalizer_taps + 8));
        if (p.produced + f < L) throw_internal("equalizer produced fewer outputs than inputs");
      }
      std::copy(tmp.begin(), tmp.begin() + static_cast<long>(L), y.begin());
    } else {
      y.assign(x.begin(), x.end());  // unequalized (peak detection)
      if (!fine_det_) {
        detect::DetectorSetup ds;
        ds.params = s_.detector_params;
        fine_det_ = std::make_unique<detect::Detector>(host_.create(s_.detector, ds));
      }
    }
    // Fine detection.
    fine_det_->reset();
    if (fine_det_->can_train()) fine_det_->train(y, tb, level_before);
    auto& bits = scratch_.bits;
    auto& llr = scratch_.llr;
    bits.resize(fine_det_->capacity_for(L) + fine_det_->max_latency());
    llr.resize(bits.size());
    size_t nb = fine_det_->process(y, er, bits, llr);
    nb += fine_det_->flush(std::span<uint8_t>(bits.data() + nb, bits.size() - nb),
                           std::span<float>(llr.data() + nb, llr.size() - nb));
    if (nb < L) {  // a detector that returns fewer bits: treat the rest as unknown
      for (size_t i = nb; i < L; ++i) {
        bits[i] = 0;
        llr[i] = 0;
      }
    }

    // Sector statistics: MSE of the equalizer output against the target applied to the
    // final decisions, and a target SNR = mean desired power / MSE (in dB).
    std::vector<int8_t> dec = levels_from_nrzi(std::span<const uint8_t>(bits.data(), L), 1);
    if (!fine_target_.empty()) {
      // NRZI decisions carry no polarity: take the sign that fits the samples.
      double se_pos = 0, se_neg = 0, sd = 0;
      size_t n = 0;
      for (size_t i = ks + fine_target_.size(); i < std::min(L, ks + header_bits_ + data_bits_); ++i) {
        double d = convolve_at(fine_target_, dec, i);
        se_pos += (y[i] - d) * (y[i] - d);
        se_neg += (y[i] + d) * (y[i] + d);
        sd += d * d;
        ++n;
      }
      double se = std::min(se_pos, se_neg);
      if (n > 0 && se > 0) {
        a.eq_mse = se / static_cast<double>(n);
        a.snr_db = 10.0 * std::log10(sd / se);
      }
    }

    // Fine sync check (evidence): the mark in the fine decisions.
    int fine_sync = 0;
    for (size_t i = 0; i < fmt_.sync_mark.size(); ++i)
      fine_sync += (bits[ks - fmt_.sync_mark.size() + i] ^ fmt_.sync_mark[i]) & 1;
    if (sync_distance >= 0)
      a.notes.push_back("sync mark at distance " + std::to_string(sync_distance) + " (coarse), " +
                        std::to_string(fine_sync) + " (fine)");
    else
      a.notes.push_back("sync mark at distance " + std::to_string(fine_sync) + " (fine)");

    // Header.
    const auto& code = format::rll89_code();
    std::vector<uint8_t> hb(static_cast<size_t>(fmt_.header_bytes)), he(hb.size());
    bool header_complete = ks + header_bits_ <= L;
    std::optional<format::SectorHeader> header;
    if (header_complete) {
      code.decode_bits(std::span<const uint8_t>(bits.data() + ks, header_bits_), hb, he);
      header = format::decode_header_bytes(fmt_, hb);
    }
    // Data bytes, their reliabilities and erasure hints.
    const size_t kd = ks + header_bits_;
    const size_t dn = kd < L ? std::min(data_bits_, L - kd) : 0;
    SectorBytes sb = sector_bytes_from_bits(fmt_, std::span<const uint8_t>(bits.data() + kd, dn),
                                            std::span<const float>(llr.data() + kd, dn),
                                            std::span<const uint8_t>(er.data() + kd, dn));
    // The capture ended inside this sector with more bytes missing than the code can
    // restore: no attempt (the next revolution's capture holds it whole).
    if (sb.missing_bytes > static_cast<size_t>(fmt_.rs.parity_symbols * fmt_.rs.interleave)) {
      ++truncated_;
      return;
    }

    if (s_.keep_channel_bits) {
      size_t e = std::min(L, kd + data_bits_);
      a.channel_bits.assign(bits.begin() + static_cast<long>(ks), bits.begin() + static_cast<long>(e));
      a.channel_llr.assign(llr.begin() + static_cast<long>(ks), llr.begin() + static_cast<long>(e));
    }
    // Eye diagram material for the probe: equalized samples and the target applied to the
    // decisions (with the polarity that fits), from the header to the end of the data.
    // A sector whose header failed keeps it until its placement names its address.
    std::vector<float> eye_y, eye_d;
    if (probe_ && probe_->eye_lba && probe_->eye_samples.empty() && !fine_target_.empty() &&
        (!header || *probe_->eye_lba == header->lba)) {
      double sp = 0, sn = 0;
      for (size_t i = ks; i < std::min(L, kd + data_bits_); ++i) {
        double d = convolve_at(fine_target_, dec, i);
        sp += (y[i] - d) * (y[i] - d);
        sn += (y[i] + d) * (y[i] + d);
      }
      double sign = sp <= sn ? 1.0 : -1.0;
      for (size_t i = ks; i < std::min(L, kd + data_bits_); ++i) {
        eye_y.push_back(y[i]);
        eye_d.push_back(static_cast<float>(sign * convolve_at(fine_target_, dec, i)));
      }
      if (header) keep_eye(std::move(eye_y), std::move(eye_d));
    }
    a.header_ok = header.has_value();
    if (header) {
      // The header names its own address; check it against the capture's track.
      a.lba = header->lba;
      a.cylinder = header->cylinder;
      a.head = header->head;
      a.sector = header->sector;
      bool consistent = fmt_.lba(header->cylinder, header->head, header->sector) == header->lba &&
                        header->cylinder < fmt_.cylinders && header->head < fmt_.heads &&
                        header->sector < fmt_.sectors_per_track;
      if (!consistent) {
        a.header_ok = false;
        a.notes.push_back("header CRC verified but its fields are inconsistent: ignored");
      } else if ((cylinder_ && *cylinder_ != header->cylinder) || (head_ && *head_ != header->head)) {
        a.notes.push_back("header names cylinder " + std::to_string(header->cylinder) + " head " +
                          std::to_string(header->head) + ", not the capture's track");
      } else {
        if (!cylinder_) cylinder_ = header->cylinder;
        if (!head_) head_ = header->head;
      }
    }
    if (a.header_ok) {
      anchors_.push_back({a.capture_position, a.sector});
      if (anchors_.size() > kAnchorWindow) anchors_.pop_front();
      decode_sector_data(fmt_, decode_options(), sb, a);
      if (late_note) a.notes.push_back(late_note);
      emit(std::move(a));
      place_deferred(false);  // header-failed sectors before this one can be placed now
    } else {
      a.notes.push_back("header unreadable");
      if (late_note) a.notes.push_back(late_note);
      deferred_.push_back(Deferred{std::move(a), std::move(sb), std::move(eye_y), std::move(eye_d)});
    }
  }

  void keep_eye(std::vector<float> y, std::vector<float> ideal) {
    if (!probe_ || !probe_->eye_samples.empty()) return;
    probe_->eye_samples = std::move(y);
    probe_->eye_ideal = std::move(ideal);
    probe_->target = fine_target_;
    probe_->equalizer_taps = fine_eq_ ? fine_eq_->taps() : std::vector<double>{};
  }

  SectorDecodeOptions decode_options() const {
    SectorDecodeOptions o;
    o.rs = &rs_;
    o.erasure_search = s_.erasure_search;
    o.chase_bits = s_.chase_bits;
    return o;
  }

  // Places sectors whose header failed, from their distance to sectors whose header
  // verified: the layout fixes the bit distance between any two sectors of a track.
  // Places the header-failed sectors that have a verified neighbour after them (all of
  // them at the end), so that they do not pile up over a long capture. Uses the last
  // kAnchorWindow verified headers, which hold the nearest one before and after each.
  void place_deferred(bool at_end) {
    if (deferred_.empty()) return;
    size_t ready = 0;
    while (ready < deferred_.size() &&
           (at_end || (!anchors_.empty() && anchors_.back().position > deferred_[ready].attempt.capture_position)))
      ++ready;
    if (ready == 0) return;
    // Capture samples per channel bit: the median over consecutive anchors (the layout
    // gives their distance in bits, modulo the track length), else the nominal figure.
    double spb = 0;
    {
      std::vector<Anchor> sorted(anchors_.begin(), anchors_.end());
      std::sort(sorted.begin(), sorted.end(), [](const Anchor& p, const Anchor& q) { return p.position < q.position; });
      std::vector<double> est;
      const double per_track = static_cast<double>(fmt_.bits_per_track);
      for (size_t i = 1; i < sorted.size(); ++i) {
        double dbits = static_cast<double>(layout_.sectors[static_cast<size_t>(sorted[i].sector)].sync_bit) -
                       static_cast<double>(layout_.sectors[static_cast<size_t>(sorted[i - 1].sector)].sync_bit);
        if (dbits <= 0) dbits += per_track;
        double v = (sorted[i].position - sorted[i - 1].position) / dbits;
        if (capture_samples_per_bit_ <= 0 || std::fabs(v / capture_samples_per_bit_ - 1.0) < 0.05) est.push_back(v);
      }
      if (!est.empty()) {
        std::nth_element(est.begin(), est.begin() + static_cast<long>(est.size() / 2), est.end());
        spb = est[est.size() / 2];
      }
    }
    if (spb <= 0) spb = capture_samples_per_bit_;
    for (size_t di = 0; di < ready; ++di) {
      Deferred& d = deferred_[di];
      SectorAttempt& a = d.attempt;
      int sector = -1;
      std::string how;
      if (!anchors_.empty() && cylinder_ && head_ && spb > 0) {
        // Nearest anchor.
        const auto* best = &anchors_.front();
        for (const auto& an : anchors_)
          if (std::fabs(an.position - a.capture_position) < std::fabs(best->position - a.capture_position)) best = &an;
        double bit = static_cast<double>(layout_.sectors[static_cast<size_t>(best->sector)].sync_bit) +
                     (a.capture_position - best->position) / spb;
        double per_track = static_cast<double>(fmt_.bits_per_track);
        bit = std::fmod(std::fmod(bit, per_track) + per_track, per_track);
        double best_dist = 1e30;
        for (const auto& sp : layout_.sectors) {
          // Anchors and this sector are both referenced to the last bit of their sync mark.
          double dist = std::fabs(static_cast<double>(sp.sync_bit) - bit);
          dist = std::min(dist, per_track - dist);
          if (dist < best_dist) {
            best_dist = dist;
            sector = sp.sector;
          }
        }
        // Accept only a placement within a small share of the sector pitch.
        if (best_dist > 0.05 * fmt_.sector_bits) sector = -1;
        else how = "placed by position: " + std::to_string(static_cast<long>(best_dist)) +
                   " bits from the nominal sync mark of sector " + std::to_string(sector);
      }
      if (sector < 0 || !cylinder_ || !head_) {
        a.notes.push_back("header unreadable and position ambiguous: not placed");
        continue;  // cannot put it anywhere: the sector stays missing unless another revolution finds it
      }
      a.cylinder = *cylinder_;
      a.head = *head_;
      a.placed_by_position = true;
      a.notes.push_back(how);
      // The address seeds the descrambler, so a wrong placement cannot verify: try the
      // implied sector first, then its neighbours; keep the implied one if none verifies.
      SectorAttempt best;
      bool have = false;
      for (int delta : {0, -1, 1}) {
        int sct = (sector + delta + fmt_.sectors_per_track) % fmt_.sectors_per_track;
        SectorAttempt t = a;
        t.sector = sct;
        t.lba = fmt_.lba(t.cylinder, t.head, t.sector);
        decode_sector_data(fmt_, decode_options(), d.bytes, t);
        if (delta != 0 && !results::is_verified(t.status)) continue;
        if (delta != 0) t.notes.push_back("verified at the neighbouring address (position estimate off by one sector)");
        if (!have || results::is_verified(t.status)) {
          best = std::move(t);
          have = true;
        }
        if (results::is_verified(best.status)) break;
      }
      if (probe_ && probe_->eye_lba && *probe_->eye_lba == best.lba && !d.eye_samples.empty())
        keep_eye(std::move(d.eye_samples), std::move(d.eye_ideal));
      emit(std::move(best));
    }
    deferred_.erase(deferred_.begin(), deferred_.begin() + static_cast<long>(ready));
  }

 public:
  double capture_samples_per_bit_ = 0;
  CaptureProbe* probe_ = nullptr;

 private:
  struct Anchor {
    double position;
    int sector;
  };

  const format::TrackFormat& fmt_;
  const detect::PluginHost& host_;
  DecodeSettings s_;
  std::string capture_name_;
  std::optional<int> cylinder_, head_;
  int revolution_ = 0;
  format::TrackLayout layout_;
  format::ReedSolomon rs_ = format::make_sector_rs(fmt_);  // built once per capture

  std::vector<uint8_t> known_bits_;
  size_t known_len_ = 0, header_bits_ = 0, data_bits_ = 0, margin_ = 0, window_len_ = 0;

  std::vector<RingEntry> ring_;
  uint64_t ring_mask_ = 0;
  uint64_t count_ = 0;             // bit samples received
  uint64_t coarse_y_count_ = 0;    // coarse equalizer outputs stored
  uint64_t coarse_bit_count_ = 0;  // coarse decisions stored

  std::vector<double> coarse_target_;
  std::unique_ptr<equalize::Equalizer> coarse_eq_;
  std::unique_ptr<detect::Detector> coarse_det_;
  std::unique_ptr<format::SyncSearch> sync_;
  std::vector<Hit> hits_pending_;       // sync marks found, oldest first
  std::vector<format::SyncHit> hit_buf_;  // scratch for the search's output
  std::optional<uint64_t> last_sector_end_;
  std::optional<uint64_t> last_sync_end_;
  std::vector<double> template_;   // correlation template (unit energy), see correlation_fallback
  std::set<uint64_t> pitches_;     // sync-to-sync distances of consecutive sectors in the layout
  uint64_t sync_marks_ = 0;
  uint64_t truncated_ = 0;  // sectors cut off by the end of the capture

  equalize::TargetSpec fine_spec_;
  std::vector<double> fine_target_;
  std::unique_ptr<equalize::Equalizer> fine_eq_;
  std::unique_ptr<detect::Detector> fine_det_;

  static constexpr size_t kAnchorWindow = 64;  // verified headers kept for placement
  std::deque<Anchor> anchors_;
  std::vector<Deferred> deferred_;
  std::vector<SectorAttempt> results_;
  const SectorSink* sink_ = nullptr;
  struct WindowScratch {
    std::vector<float> x, cy, y, tmp, llr;
    std::vector<uint8_t> cb, er, tb, bits;
  } scratch_;
  struct CoarseScratch {
    std::vector<float> in, out, llr;
    std::vector<uint8_t> er_in, er, bits;
  } coarse_scratch_;

  void emit(SectorAttempt&& a) {
    if (sink_ && *sink_) {
      (*sink_)(std::move(a));
    } else {
      results_.push_back(std::move(a));
    }
  }
};

}  // namespace

CaptureResult CaptureDecoder::decode(const JobCapture& capture, const load::LoadOptions& load_options,
                                     CaptureProbe* probe, const SectorSink& sink) {
  load::LoadOptions lo = load_options;
  load::CaptureReader reader = load::open_capture(capture.path, lo);
  const load::CaptureInfo& info = reader.info();

  if (!info.format.empty() && info.format != fmt_.name)
    throw_input(capture.path.string(), "capture is in format '" + info.format + "', the job decodes '" +
                                           fmt_.name + "' (use the right --format or job)");
  JobCapture cap = capture;
  if (!cap.cylinder) cap.cylinder = info.cylinder;
  if (!cap.head) cap.head = info.head;
  if (!cap.revolution) cap.revolution = info.revolution;

  CaptureResult result;
  CaptureSummary& sum = result.summary;
  sum.path = std::filesystem::absolute(capture.path).lexically_normal().string();
  sum.sample_rate_hz = info.sample_rate_hz;
  sum.cylinder = cap.cylinder.value_or(-1);
  sum.head = cap.head.value_or(-1);
  sum.revolution = cap.revolution.value_or(-1);
  if (settings_.bit_rate_hz) {
    sum.bit_rate_hz = *settings_.bit_rate_hz;
    sum.bit_rate_source = "option";
  } else if (info.bit_rate_hz) {
    sum.bit_rate_hz = *info.bit_rate_hz;
    sum.bit_rate_source = "sidecar";
  } else {
    sum.bit_rate_hz = fmt_.bit_rate_hz;
    sum.bit_rate_source = "descriptor";
  }
  const double spb_capture = info.sample_rate_hz / sum.bit_rate_hz;
  if (spb_capture < 1.2)
    throw_input(capture.path.string(), "sample rate " + std::to_string(info.sample_rate_hz) +
                                           " Hz is too low for a bit rate of " + std::to_string(sum.bit_rate_hz) +
                                           " Hz (need more than 1.2 samples per bit)");

  ConditionerConfig cc;
  cc.sample_rate_hz = info.sample_rate_hz;
  cc.bit_rate_hz = sum.bit_rate_hz;
  cc.full_scale = info.full_scale;
  Conditioner cond(cc);
  Resampler rs(ResamplerConfig::for_bit_rate(info.sample_rate_hz, sum.bit_rate_hz, settings_.samples_per_bit));
  timing::TimingLoopConfig tc;
  tc.samples_per_bit = settings_.samples_per_bit;
  tc.acquire_bandwidth = settings_.pll_acquire_bandwidth;
  tc.track_bandwidth = settings_.pll_track_bandwidth;
  tc.pw50_bits = settings_.pw50_bits;
  tc.midpoints = false;  // the framer keeps only the bit instants
  timing::TimingLoop pll(tc);

  TrackFramer framer(fmt_, host_, settings_, cap, capture.path.filename().string());
  framer.probe_ = probe;
  framer.set_sink(&sink);
  if (probe) {
    probe->sample_rate_hz = info.sample_rate_hz;
    probe->bit_rate_hz = sum.bit_rate_hz;
  }
  framer.capture_samples_per_bit_ = spb_capture;

  const size_t chunk = 1 << 16;
  std::vector<float> raw(chunk), conditioned(chunk + cond.latency() + 16);
  std::vector<uint8_t> cflags(conditioned.size());
  std::vector<float> resampled(static_cast<size_t>(chunk / std::max(1.0, spb_capture / settings_.samples_per_bit)) + 4096);
  std::vector<uint8_t> rflags(resampled.size());
  std::vector<timing::BitSample> bits(resampled.size());
  std::vector<uint8_t> bflags(bits.size());
  // Resampled flags by absolute resampled index, for the bit samples the PLL makes.
  constexpr size_t flag_ring_size = 1 << 16;  // a power of two: index & (size - 1)
  std::vector<uint8_t> flag_ring(flag_ring_size, 0);
  uint64_t resampled_count = 0;
  int64_t last_flagged = -2;  // newest resampled index with a flag set

  // The bit samples go to the framer directly, or, with a front-end thread, through a
  // bounded queue to the framer on this thread (the same blocks in the same order).
  BitBlockQueue queue(4);
  const bool threaded = front_end_thread_;
  auto emit = [&](std::span<const timing::BitSample> b, std::span<const uint8_t> f) {
    if (b.empty()) return;
    if (threaded)
      queue.push(b, f);
    else
      framer.push(b, f);
  };

  auto run_pll = [&](std::span<const float> in) {
    size_t off = 0;
    while (off < in.size()) {
      Progress p = pll.process(in.subspan(off), bits);
      off += p.consumed;
      if (probe) pll.drain_trace(probe->pll_trace);
      for (size_t i = 0; i < p.produced; ++i) {
        // nearest resampled index (positions are >= 0; truncation of x + 0.5 is llround there)
        const double pos = bits[i].position;
        auto idx = pos >= 0 ? static_cast<int64_t>(pos + 0.5) : static_cast<int64_t>(std::llround(pos));
        uint8_t f = 0;
        // Flags are rare: nothing to look up when none was set at or after idx - 1.
        if (idx - 1 <= last_flagged) {
          for (int64_t j = idx - 1; j <= idx + 1; ++j)
            if (j >= 0 && static_cast<uint64_t>(j) < resampled_count &&
                resampled_count - static_cast<uint64_t>(j) < flag_ring.size())
              f |= flag_ring[static_cast<size_t>(j) & (flag_ring_size - 1)];
        }
        bflags[i] = f;
        bits[i].position = rs.input_position(0) + bits[i].position * rs.ratio();  // capture samples
      }
      emit(std::span<const timing::BitSample>(bits.data(), p.produced),
           std::span<const uint8_t>(bflags.data(), p.produced));
      if (p.consumed == 0 && p.produced == 0) break;
    }
  };
  auto run_resampler = [&](std::span<const float> in, std::span<const uint8_t> fl, bool flushing) {
    size_t off = 0;
    while (true) {
      Progress p;
      if (flushing) {
        p = rs.flush(resampled, rflags);
      } else {
        if (off >= in.size()) break;
        p = rs.process(in.subspan(off), fl.subspan(off), resampled, rflags);
        off += p.consumed;
      }
      for (size_t i = 0; i < p.produced; ++i) {
        flag_ring[(resampled_count + i) & (flag_ring_size - 1)] = rflags[i];
        if (rflags[i]) last_flagged = static_cast<int64_t>(resampled_count + i);
      }
      resampled_count += p.produced;
      run_pll(std::span<const float>(resampled.data(), p.produced));
      if (flushing && p.produced == 0) break;
      if (!flushing && p.consumed == 0 && p.produced == 0) break;
    }
  };

  uint64_t total = 0;
  auto run_front_end = [&] {
    while (size_t n = reader.read(raw)) {
      if (probe && probe->raw_samples.size() < probe->raw_samples_wanted) {
        size_t k = std::min(n, probe->raw_samples_wanted - probe->raw_samples.size());
        probe->raw_samples.insert(probe->raw_samples.end(), raw.begin(), raw.begin() + static_cast<long>(k));
      }
      total += n;
      size_t off = 0;
      while (off < n) {
        Progress p = cond.process(std::span<const float>(raw.data() + off, n - off), conditioned, cflags);
        off += p.consumed;
        run_resampler(std::span<const float>(conditioned.data(), p.produced),
                      std::span<const uint8_t>(cflags.data(), p.produced), false);
        if (p.consumed == 0) break;
      }
    }
    {
      std::vector<float> tail(cond.pending() + 16);
      std::vector<uint8_t> tf(tail.size());
      Progress p = cond.flush(tail, tf);
      run_resampler(std::span<const float>(tail.data(), p.produced), std::span<const uint8_t>(tf.data(), p.produced),
                    false);
      run_resampler({}, {}, true);
    }
  };
  if (!threaded) {
    run_front_end();
  } else {
    // Load, conditioning, resampling and the PLL on a thread of their own; the framer
    // (equalizers, detectors, sector decoding) here. An error on either side stops both.
    std::exception_ptr front_error;
    std::thread front([&] {
      try {
        run_front_end();
      } catch (...) {
        front_error = std::current_exception();
      }
      queue.close();
    });
    try {
      BitBlockQueue::Block block;
      while (queue.pop(block)) {
        framer.push(block.bits, block.flags);
        queue.recycle(std::move(block));
      }
    } catch (...) {
      queue.cancel();
      front.join();
      throw;
    }
    front.join();
    if (front_error) std::rethrow_exception(front_error);
  }
  framer.finish();
  if (probe) {
    pll.drain_trace(probe->pll_trace);
    // Trace positions are in resampled samples: give them in capture samples.
    for (auto& t : probe->pll_trace) t.position = rs.input_position(0) + t.position * rs.ratio();
  }

  sum.samples = total;
  sum.bits = framer.bits();
  sum.sync_marks = framer.sync_marks();
  sum.truncated_sectors = framer.truncated();
  sum.lock_losses = pll.stats().lock_losses;
  sum.cycle_slips = pll.stats().cycle_slips;
  sum.rate_offset_ppm = pll.stats().rate_offset * 1e6;
  sum.clipped_fraction = cond.summary().clipped_fraction;
  sum.equalizer_taps = framer.fine_taps();
  sum.target = framer.fine_target();
  sum.target_name = framer.fine_target_name();
  result.sectors = framer.take_results();
  return result;
}

}  // namespace salvor::pipeline
