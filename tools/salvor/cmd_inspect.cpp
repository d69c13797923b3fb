// salvor inspect: what is in a capture. Streams the capture once (twice when the first
// pass finds a PW50 far from the guess the timing loop started with) through load ->
// condition -> resample (2 samples per bit) -> timing loop -> sync search, then fits
// PW50 and SNR on the known bits around the sync marks (core/analysis).

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <iostream>
#include <optional>
#include <sstream>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "analysis/channel_fit.hpp"
#include "analysis/sync_search.hpp"
#include "cli_common.hpp"
#include "common/error.hpp"
#include "condition/conditioner.hpp"
#include "format/track_codec.hpp"
#include "format/track_format.hpp"
#include "load/capture_reader.hpp"
#include "resample/bit_rate_estimate.hpp"
#include "resample/resampler.hpp"
#include "timing/timing_loop.hpp"

namespace salvor::cli {

namespace {

using nlohmann::json;

constexpr double kSamplesPerBit = 2.0;    // the timing loop's input rate
constexpr double kDefaultPw50 = 2.0;      // first guess when the format says nothing
constexpr uint64_t kEstimateSamples = 1u << 22;  // bit-rate estimate: first 4 Mi samples

struct PassResult {
  uint64_t samples = 0;
  ConditionSummary condition;
  std::vector<analysis::SyncHit> hits;
  std::vector<analysis::PreambleHit> preambles;
  analysis::ChannelFitResult fit;
  timing::TimingStats pll;
  std::vector<timing::LockEvent> events;
  std::vector<timing::TimingTracePoint> trace;
  uint64_t slip_events = 0, slip_bits = 0;
};

struct Setup {
  double sample_rate_hz = 0;
  double nominal_bit_rate_hz = 0;
  double full_scale = 1;
  const format::TrackFormat* fmt = nullptr;
  std::vector<uint64_t> layout_sync_bits;
};

PassResult run_pass(load::CaptureReader& reader, const Setup& s, double pw50) {
  reader.rewind();
  ConditionerConfig cc;
  cc.sample_rate_hz = s.sample_rate_hz;
  cc.bit_rate_hz = s.nominal_bit_rate_hz;
  cc.full_scale = s.full_scale;
  Conditioner cond(cc);
  Resampler rs(ResamplerConfig::for_bit_rate(s.sample_rate_hz, s.nominal_bit_rate_hz, kSamplesPerBit));

  timing::TimingLoopConfig tc;
  tc.samples_per_bit = kSamplesPerBit;
  tc.pw50_bits = pw50;
  tc.position_offset = rs.input_position(0);  // bit positions in capture samples
  tc.position_scale = rs.ratio();
  timing::TimingLoop pll(tc);

  std::optional<analysis::SyncSearch> search;
  if (s.fmt) {
    analysis::SyncSearchConfig sc;
    sc.preamble_bits = s.fmt->preamble_bits;
    sc.sync_mark = s.fmt->sync_mark;
    sc.pw50_bits = pw50;
    sc.layout_sync_bits = s.layout_sync_bits;
    sc.bits_per_track = s.fmt->bits_per_track;
    search.emplace(sc);
  }

  PassResult r;
  const size_t chunk = 1 << 16;
  std::vector<float> raw(chunk), conditioned(chunk + cond.latency() + 16);
  std::vector<float> resampled(size_t(double(conditioned.size()) / std::max(0.25, rs.ratio())) + 4096);
  std::vector<timing::BitSample> bits(resampled.size());

  auto run_pll = [&](std::span<const float> in) {
    while (true) {
      const Progress p = pll.process(in, bits);
      if (search) search->process(std::span<const timing::BitSample>(bits.data(), p.produced));
      in = in.subspan(p.consumed);
      if (in.empty() && p.produced < bits.size()) break;
      if (p.consumed == 0 && p.produced == 0) break;
    }
  };
  auto run_resampler = [&](std::span<const float> in, bool flushing) {
    while (true) {
      Progress p;
      if (flushing) {
        p = rs.flush(resampled);
      } else {
        if (in.empty()) break;
        p = rs.process(in, resampled);
        in = in.subspan(p.consumed);
      }
      run_pll(std::span<const float>(resampled.data(), p.produced));
      if (p.produced == 0 && (flushing || p.consumed == 0)) break;
    }
  };
  while (const size_t n = reader.read(raw)) {
    r.samples += n;
    std::span<const float> in(raw.data(), n);
    while (!in.empty()) {
      const Progress p = cond.process(in, conditioned);
      run_resampler(std::span<const float>(conditioned.data(), p.produced), false);
      in = in.subspan(p.consumed);
      if (p.consumed == 0 && p.produced == 0) throw_internal("inspect: conditioner made no progress");
    }
  }
  {
    std::vector<float> tail(cond.pending() + 16);
    std::vector<uint8_t> tail_flags(tail.size());
    const Progress p = cond.flush(tail, tail_flags);
    run_resampler(std::span<const float>(tail.data(), p.produced), false);
    run_resampler({}, true);
  }
  r.condition = cond.summary();
  r.pll = pll.stats();
  pll.drain_events(r.events);
  pll.drain_trace(r.trace);
  if (search) {
    search->drain_hits(r.hits);
    search->drain_preambles(r.preambles);
    r.fit = analysis::fit_channel(search->fit_windows(), search->known_transitions(), search->known_first_bit(),
                                  kSamplesPerBit);
    r.slip_events = search->slip_events();
    r.slip_bits = search->slips_total();
  }
  return r;
}

std::string fmt_num(const char* f, double v) {
  char buf[64];
  std::snprintf(buf, sizeof buf, f, v);
  return buf;
}

json number_or_null(bool ok, double v) { return ok && std::isfinite(v) ? json(v) : json(nullptr); }

}  // namespace

int run_inspect(const std::vector<std::string>& args) {
  return guarded("inspect", [&]() -> int {
    po::options_description opts("options");
    opts.add_options()
        ("capture", po::value<std::string>(), "capture file (positional)")
        ("format", po::value<std::string>(), "track format descriptor: name (tf1-512) or path; default: the sidecar's")
        ("json", "print one JSON object instead of the table")
        ("channel", po::value<int>(), "channel of a multi-channel capture (0-based)")
        ("sample-rate", po::value<double>(), "sample rate in Hz (overrides sidecar and container)")
        ("bit-rate", po::value<double>(), "nominal channel bit rate in Hz (default: sidecar, then descriptor, then estimated)");
    po::positional_options_description pos;
    pos.add("capture", 1);
    po::variables_map vm;
    if (!parse_command_line("inspect", "CAPTURE [options]", args, opts, pos, vm)) return exit_ok;
    if (!vm.count("capture")) throw_usage("salvor inspect", "a CAPTURE file is required (see --help)");
    const std::string path = vm["capture"].as<std::string>();

    load::LoadOptions lo;
    if (vm.count("channel")) {
      if (vm["channel"].as<int>() < 0) throw_usage("--channel", "must be 0 or more");
      lo.channel = vm["channel"].as<int>();
    }
    if (vm.count("sample-rate")) {
      const double v = vm["sample-rate"].as<double>();
      if (!(v > 0) || !std::isfinite(v)) throw_usage("--sample-rate", "must be a positive number of Hz");
      lo.sample_rate_hz = v;
    }
    std::optional<double> bit_rate_opt;
    if (vm.count("bit-rate")) {
      const double v = vm["bit-rate"].as<double>();
      if (!(v > 0) || !std::isfinite(v)) throw_usage("--bit-rate", "must be a positive number of Hz");
      bit_rate_opt = v;
    }
    load::CaptureReader reader = load::open_capture(path, lo);
    const load::CaptureInfo& info = reader.info();

    // Track format: --format, else the sidecar's name.
    std::optional<format::TrackFormat> fmt;
    std::string format_name = vm.count("format") ? vm["format"].as<std::string>() : info.format;
    if (!format_name.empty()) fmt = format::load_track_format(format::find_track_format(format_name));

    Setup s;
    s.sample_rate_hz = info.sample_rate_hz;
    s.full_scale = info.full_scale;
    std::string bit_rate_source;
    if (bit_rate_opt) {
      s.nominal_bit_rate_hz = *bit_rate_opt;
      bit_rate_source = "option";
    } else if (info.bit_rate_hz) {
      s.nominal_bit_rate_hz = *info.bit_rate_hz;
      bit_rate_source = "sidecar";
    } else if (fmt) {
      s.nominal_bit_rate_hz = fmt->bit_rate_hz;
      bit_rate_source = "descriptor";
    } else {
      // Estimate from the preamble's line on the first samples (bounded buffer).
      std::vector<float> head;
      std::vector<float> buf(1 << 16);
      while (head.size() < kEstimateSamples) {
        const size_t n = reader.read(buf);
        if (!n) break;
        head.insert(head.end(), buf.begin(), buf.begin() + long(n));
      }
      BitRateEstimateConfig bc;
      bc.sample_rate_hz = info.sample_rate_hz;
      const BitRateEstimate est = estimate_bit_rate(head, bc);
      s.nominal_bit_rate_hz = est.bit_rate_hz;
      bit_rate_source = "preamble line estimate";
    }
    if (!(s.nominal_bit_rate_hz > 0)) throw_input(path, "no bit rate known and none could be estimated; give --bit-rate");
    if (s.sample_rate_hz / s.nominal_bit_rate_hz < 1.2) {
      throw_input(path, "sample rate " + fmt_num("%.6g", s.sample_rate_hz) + " Hz is too low for a bit rate of " +
                            fmt_num("%.6g", s.nominal_bit_rate_hz) + " Hz (need more than 1.2 samples per bit)");
    }
    format::TrackLayout layout;
    if (fmt) {
      s.fmt = &*fmt;
      layout = format::layout_track(*fmt);
      for (const auto& sec : layout.sectors) s.layout_sync_bits.push_back(sec.sync_bit);
    }

    // Pass 1 with a PW50 guess; pass 2 when the fit says the guess was far off (the
    // in-loop prefilter and the sync template are designed for the PW50 they are given).
    double pw50_used = kDefaultPw50;
    PassResult r = run_pass(reader, s, pw50_used);
    if (r.fit.valid && std::fabs(r.fit.pw50_bits - pw50_used) > 0.1 * pw50_used) {
      pw50_used = std::clamp(r.fit.pw50_bits, 0.8, 5.0);
      r = run_pass(reader, s, pw50_used);
    }

    // Frequency offset: mean over the tracked bits between sync marks, else over the trace.
    double offset_sum = 0;
    double offset_n = 0;
    for (const auto& h : r.hits) offset_sum += h.rate_offset * double(h.rate_bits), offset_n += double(h.rate_bits);
    if (!offset_n)
      for (const auto& t : r.trace)
        if (t.state == timing::TimingState::track) offset_sum += t.rate_offset, ++offset_n;
    const bool have_offset = offset_n > 0;
    const double offset = have_offset ? offset_sum / offset_n : 0.0;
    const double bit_rate = s.nominal_bit_rate_hz * (1.0 + offset);
    const double spb = s.sample_rate_hz / bit_rate;

    // Sector of a sync mark: its bit position from the index (the rig's index sample,
    // else the capture start), modulo the track, nearest layout position within 16 bits.
    double index_sample = 0;
    if (info.sidecar.is_object() && info.sidecar.contains("rig") && info.sidecar["rig"].is_object() &&
        info.sidecar["rig"].contains("index_sample") && info.sidecar["rig"]["index_sample"].is_number())
      index_sample = info.sidecar["rig"]["index_sample"].get<double>();
    auto sector_of = [&](double position) -> std::optional<int> {
      if (!fmt || fmt->bits_per_track == 0) return std::nullopt;
      const double bpt = double(fmt->bits_per_track);
      double b = std::fmod((position - index_sample) / spb, bpt);
      if (b < 0) b += bpt;
      for (const auto& sec : layout.sectors) {
        double d = std::fabs(b - double(sec.sync_bit));
        d = std::min(d, bpt - d);
        if (d <= 16) return sec.sector;
      }
      return std::nullopt;
    };

    // lock spans from the events
    json spans = json::array();
    double span_start = -1;
    for (const auto& e : r.events) {
      if (e.locked) {
        span_start = e.position;
      } else if (span_start >= 0) {
        spans.push_back({{"first_sample", span_start}, {"end_sample", e.position}});
        span_start = -1;
      }
    }
    if (span_start >= 0) spans.push_back({{"first_sample", span_start}, {"end_sample", double(r.samples)}});

    const double duration = double(r.samples) / s.sample_rate_hz;
    const double locked_fraction = r.pll.bits ? double(r.pll.locked_bits) / double(r.pll.bits) : 0.0;
    const size_t locked_hits = size_t(std::count_if(r.hits.begin(), r.hits.end(), [](auto& h) { return h.locked; }));

    if (vm.count("json")) {
      json j;
      j["capture"] = path;
      j["container"] = info.container_detail;
      j["channel"] = info.channel;
      j["sample_rate_hz"] = s.sample_rate_hz;
      j["samples"] = r.samples;
      j["duration_s"] = duration;
      j["clipped_fraction"] = r.condition.clipped_fraction;
      j["dc_offset"] = r.condition.dc_offset;
      j["full_scale"] = s.full_scale;
      j["format"] = fmt ? json(fmt->name) : json(nullptr);
      j["nominal_bit_rate_hz"] = s.nominal_bit_rate_hz;
      j["bit_rate_source"] = bit_rate_source;
      j["bit_rate_hz"] = bit_rate;
      j["samples_per_bit"] = spb;
      j["frequency_offset_ppm"] = number_or_null(have_offset, offset * 1e6);
      j["snr_db"] = number_or_null(r.fit.valid, r.fit.snr_db);
      j["pw50_bits"] = number_or_null(r.fit.valid, r.fit.pw50_bits);
      j["fit_windows"] = r.fit.windows;
      // preambles are counted on the bit samples by the sync search (needs the format)
      j["preambles_found"] = fmt ? json(r.preambles.size()) : json(nullptr);
      json pre = json::array();
      for (const auto& p : r.preambles) pre.push_back({{"sample", p.position}});
      j["preambles"] = pre;
      j["sync_marks_found"] = r.hits.size();
      json sm = json::array();
      for (const auto& h : r.hits) {
        const auto sec = sector_of(h.position);
        sm.push_back({{"sample", h.position},
                      {"sector_guess", sec ? json(*sec) : json(nullptr)},
                      {"correlation", h.correlation},
                      {"locked", h.locked},
                      {"frequency_offset_ppm", h.rate_offset * 1e6},
                      {"frequency_offset_bits", h.rate_bits},  // tracked bits averaged (0: sync window only)
                      {"slip_bits", h.slip_bits}});
      }
      j["sync_marks"] = sm;
      j["lock"] = {{"locked_fraction", locked_fraction},
                   {"acquisitions", r.pll.acquisitions},
                   {"lock_losses", r.pll.lock_losses},
                   {"cycle_slips", r.pll.cycle_slips},
                   {"sync_spacing_slips", r.slip_events},
                   {"spans", spans}};
      j["timing_loop_pw50_bits"] = pw50_used;
      std::cout << j.dump(2) << "\n";
      return exit_ok;
    }

    // Human output: two aligned columns with units.
    std::vector<std::pair<std::string, std::string>> rows;
    rows.push_back({"capture", path});
    rows.push_back({"container", info.container_detail + ", channel " + std::to_string(info.channel)});
    rows.push_back({"sample rate", fmt_num("%.6g MHz", s.sample_rate_hz / 1e6)});
    rows.push_back({"samples", std::to_string(r.samples) + fmt_num("  (%.4g ms)", duration * 1e3)});
    rows.push_back({"clipped", fmt_num("%.4f %%", 100 * r.condition.clipped_fraction)});
    rows.push_back({"DC offset", fmt_num("%+.4g", r.condition.dc_offset) + fmt_num("  (full scale %.4g)", s.full_scale)});
    rows.push_back({"format", fmt ? fmt->name : std::string("unknown (no --format, no sidecar format)")});
    rows.push_back({"bit rate", fmt_num("%.6f MHz", bit_rate / 1e6) + "  (nominal " +
                                    fmt_num("%.6f MHz", s.nominal_bit_rate_hz / 1e6) + " from " + bit_rate_source + ")"});
    rows.push_back({"samples per bit", fmt_num("%.5f", spb)});
    rows.push_back({"frequency offset", have_offset ? fmt_num("%+.1f ppm", offset * 1e6) : std::string("-")});
    rows.push_back({"SNR", r.fit.valid ? fmt_num("%.1f dB", r.fit.snr_db) + "  (peak / rms noise in the bit-rate Nyquist band)"
                                       : std::string("- (needs sync marks)")});
    rows.push_back({"PW50", r.fit.valid ? fmt_num("%.2f bit periods", r.fit.pw50_bits) : std::string("- (needs sync marks)")});
    rows.push_back({"preambles found", fmt ? std::to_string(r.preambles.size()) : std::string("- (needs a track format)")});
    rows.push_back({"sync marks found", fmt ? std::to_string(r.hits.size()) + " (" + std::to_string(locked_hits) + " with the PLL locked)"
                                            : std::string("- (needs a track format)")});
    rows.push_back({"PLL locked", fmt_num("%.1f %% of bits", 100 * locked_fraction) + ", " +
                                      std::to_string(r.pll.acquisitions) + " acquisitions, " +
                                      std::to_string(r.pll.lock_losses) + " lock losses"});
    rows.push_back({"cycle slips", std::to_string(r.pll.cycle_slips) + " seen by the PLL, " + std::to_string(r.slip_events) +
                                       " from sync-mark spacing"});
    size_t width = 0;
    for (const auto& [k, v] : rows) width = std::max(width, k.size());
    for (const auto& [k, v] : rows) std::cout << k << std::string(width + 2 - k.size(), ' ') << v << "\n";
    if (r.hits.size() > 24) {
      // a short table: the per-sector detail is in --json
      double lo = 1e9, hi = -1e9;
      for (const auto& h : r.hits) lo = std::min(lo, h.rate_offset * 1e6), hi = std::max(hi, h.rate_offset * 1e6);
      std::cout << std::string("per-sector offset") << std::string(width + 2 - 17, ' ')
                << fmt_num("%+.1f", lo) << fmt_num(" .. %+.1f ppm over the sync marks (details: --json)\n", hi);
    } else if (!r.hits.empty()) {
      std::cout << "\nsector  sample         locked  offset\n";
      for (const auto& h : r.hits) {
        const auto sec = sector_of(h.position);
        char line[128];
        std::snprintf(line, sizeof line, "%-6s  %-13.1f  %-6s  %+.1f ppm%s\n", sec ? std::to_string(*sec).c_str() : "?",
                      h.position, h.locked ? "yes" : "no", h.rate_offset * 1e6,
                      h.slip_bits ? (" slip " + std::to_string(h.slip_bits) + " bits").c_str() : "");
        std::cout << line;
      }
    }
    return exit_ok;
  });
}

}  // namespace salvor::cli
