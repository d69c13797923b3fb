#include "pipeline/retry.hpp"

#include <algorithm>
#include <cstdio>
#include <filesystem>
#include <chrono>
#include <map>
#include <set>

#include "pipeline/decode_job.hpp"
#include "pipeline/revolution_combine.hpp"
#include "pipeline/sector_decode.hpp"
#include "results/confidence.hpp"

namespace salvor::pipeline {

using results::SectorAttempt;

namespace {

bool pipeline_supports(const detect::DetectorInfo& d) {
  // The peak detector works, but on an equalized PRML channel it only wastes time; the
  // template plugin is the example for plugin authors.
  return d.target != "none" && d.name != "template";
}

std::set<uint64_t> unverified(const results::DecodeFolder& f) {
  std::set<uint64_t> u;
  for (const auto& a : f.final_attempts())
    if (!results::is_verified(a.status) && a.status != results::SectorStatus::conflict) u.insert(a.lba);
  return u;
}

}  // namespace

std::vector<RetryStrategy> retry_strategies(const DecodeSettings& base, const detect::PluginHost& host,
                                            const std::vector<std::string>& detectors) {
  // Most capable first: pattern-dependent and noise-predictive detectors handle media
  // noise and coloured noise, where plain Viterbi lost the sector.
  const std::vector<std::string> preferred = {"pdnp", "npml", "maxlogmap", "viterbi", "dfe"};
  std::vector<std::string> dets;
  auto allowed = [&](const std::string& n) {
    const auto* d = host.find(n);
    if (!d || !pipeline_supports(*d)) return false;
    return detectors.empty() || std::find(detectors.begin(), detectors.end(), n) != detectors.end();
  };
  for (const auto& n : preferred)
    if (allowed(n)) dets.push_back(n);
  for (const auto* d : host.detectors())
    if (allowed(d->name) && std::find(dets.begin(), dets.end(), d->name) == dets.end()) dets.push_back(d->name);

  std::vector<RetryStrategy> out;
  auto add = [&](const std::string& name, DecodeSettings s) {
    s.keep_channel_bits = true;
    s.chase_bits = 10;
    s.detector_params.clear();
    out.push_back({name, std::move(s)});
  };
  for (const auto& d : dets) {
    DecodeSettings s = base;
    s.detector = d;
    s.target.clear();
    add(d, s);
  }
  if (dets.empty()) return out;
  const std::string best = dets.front();
  DecodeSettings v = base;
  v.detector = best;
  v.target.clear();
  {
    // Right after the first detector: averaging aligned revolutions gains ~10 log10(N) dB
    // against electronic noise, more than any detector change.
    add(best + "/combined", v);
    out.back().combine_revolutions = true;
    std::rotate(out.begin() + 1, out.end() - 1, out.end());
  }
  {
    DecodeSettings s = v;
    s.equalizer_taps = 21;
    s.equalizer_step = 0.005;
    s.training_epochs = 3;
    add(best + "/eq21", s);
  }
  {
    DecodeSettings s = v;
    s.pll_track_bandwidth = base.pll_track_bandwidth / 2;
    add(best + "/pll-narrow", s);
  }
  {
    DecodeSettings s = v;
    s.pll_track_bandwidth = base.pll_track_bandwidth * 2;
    add(best + "/pll-wide", s);
  }
  // The detectors' own parameters: a longer noise predictor, longer data patterns, a
  // deeper traceback (only for detectors that are loaded and allowed).
  auto with_param = [&](const std::string& det, const std::string& key, const std::string& value) {
    if (std::find(dets.begin(), dets.end(), det) == dets.end()) return;
    DecodeSettings s = base;
    s.detector = det;
    s.target.clear();
    add(det + "/" + key + "=" + value, s);
    out.back().settings.detector_params = {{key, value}};
  };
  with_param("pdnp", "pattern_length", "4");
  with_param("npml", "predictor_order", "4");
  with_param("viterbi", "traceback_depth", "128");
  for (const char* t : {"GPR", "E2PR4", "PR4"}) {
    DecodeSettings s = v;
    s.target = t;
    s.gpr_length = 4;
    add(best + "/" + t, s);
  }
  return out;
}

RetryReport run_retry(const Job& job, const format::TrackFormat& fmt, const detect::PluginHost& host,
                      const std::vector<RetryStrategy>& strategies, results::DecodeFolder& folder,
                      const RetryOptions& options) {
  RetryReport report;
  const auto t0 = std::chrono::steady_clock::now();
  std::set<uint64_t> todo = unverified(folder);
  if (todo.empty()) {
    report.nothing_to_do = true;
    return report;
  }
  const size_t before = todo.size();
  bool any_new = false;
  for (const auto& st : strategies) {
    if (todo.empty()) break;
    if (std::find(options.already_tried.begin(), options.already_tried.end(), st.name) != options.already_tried.end())
      continue;
    double elapsed = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    if (options.budget_seconds > 0 && elapsed >= options.budget_seconds) {
      report.budget_exhausted = true;
      break;
    }
    any_new = true;
    const auto ts = std::chrono::steady_clock::now();
    // Only the captures of tracks that still hold unverified sectors.
    std::set<std::pair<int, int>> tracks;
    for (uint64_t lba : todo) {
      const auto& a = folder.final_attempt(lba);
      tracks.insert({a.cylinder, a.head});
    }
    Job sub = job;
    sub.captures.clear();
    std::map<std::pair<int, int>, std::vector<int>> combined_revs;
    if (st.combine_revolutions) {
      // One work capture per track: the aligned average of its revolutions.
      std::map<std::pair<int, int>, std::vector<const JobCapture*>> per_track;
      for (const auto& c : job.captures)
        if (c.cylinder && c.head && tracks.count({*c.cylinder, *c.head})) per_track[{*c.cylinder, *c.head}].push_back(&c);
      for (auto& [track, list] : per_track) {
        if (list.size() < 2) continue;
        std::sort(list.begin(), list.end(),
                  [](const JobCapture* a, const JobCapture* b) { return a->revolution.value_or(0) < b->revolution.value_or(0); });
        std::vector<std::filesystem::path> paths;
        std::vector<int> revs;
        for (const auto* c : list) {
          paths.push_back(c->path);
          revs.push_back(c->revolution.value_or(0));
        }
        CombinedCapture cc = combine_revolutions(paths);
        char name[64];
        std::snprintf(name, sizeof name, "c%03d-h%d-combined.w64", track.first, track.second);
        std::filesystem::path work = folder.dir() / "work" / name;
        write_combined_capture(cc, paths.front(), revs, work);
        JobCapture jc = *list.front();
        jc.path = work;
        sub.captures.push_back(jc);
        combined_revs[track] = revs;
      }
    } else {
      for (const auto& c : job.captures)
        if (c.cylinder && c.head && tracks.count({*c.cylinder, *c.head})) sub.captures.push_back(c);
    }

    // Decode, then keep the attempts at unverified sectors.
    JobRunOptions ro;
    ro.threads = options.threads;
    if (options.progress) ro.progress = [&](size_t d, size_t n) { options.progress(st.name, d, n); };
    size_t attempts = 0;
    std::map<uint64_t, std::vector<SectorAttempt>> by_lba;
    if (!sub.captures.empty()) {
      std::vector<SectorAttempt> got;
      run_job_collect(sub, fmt, host, st.settings, ro, got);
      for (auto& a : got) {
        if (!todo.count(a.lba)) continue;
        a.attempt = "retry:" + st.name;
        if (st.combine_revolutions) {
          a.revolutions = combined_revs[{a.cylinder, a.head}];
          a.notes.push_back("decoded from the aligned average of " + std::to_string(a.revolutions.size()) + " revolutions");
        }
        by_lba[a.lba].push_back(a);
        SectorAttempt logged = a;
        logged.channel_bits.clear();
        logged.channel_llr.clear();
        folder.record(std::move(logged));
        ++attempts;
      }
    }
    // Sum the LLRs of every revolution of a sector that is still unverified.
    const size_t header_bits = static_cast<size_t>(fmt.header_bytes) * 9;
    const size_t full = header_bits + static_cast<size_t>(fmt.coded_bytes) * 9;
    for (auto& [lba, list] : by_lba) {
      if (results::is_verified(folder.final_attempt(lba).status)) continue;
      std::map<int, const SectorAttempt*> per_rev;  // one attempt per revolution
      for (const auto& a : list)
        if (a.channel_llr.size() == full && a.revolutions.size() == 1) per_rev.emplace(a.revolutions[0], &a);
      if (per_rev.size() < 2) continue;
      std::vector<float> sum(full, 0.0f);
      SectorAttempt c = *per_rev.begin()->second;
      c.revolutions.clear();
      c.notes.clear();
      for (const auto& [rev, a] : per_rev) {
        // NRZI bits carry no polarity, so LLRs of different revolutions add directly.
        for (size_t i = 0; i < full; ++i) sum[i] += a->channel_llr[i];
        c.revolutions.push_back(rev);
      }
      std::vector<uint8_t> bits(full);
      for (size_t i = 0; i < full; ++i) bits[i] = sum[i] > 0 ? 1 : 0;
      SectorBytes sb = sector_bytes_from_bits(fmt, std::span<const uint8_t>(bits.data() + header_bits, full - header_bits),
                                              std::span<const float>(sum.data() + header_bits, full - header_bits), {});
      c.attempt = "retry:" + st.name + "+llr-sum";
      c.notes.push_back("LLRs of " + std::to_string(per_rev.size()) + " revolutions summed");
      SectorDecodeOptions o;
      o.erasure_search = true;
      o.chase_bits = 10;
      decode_sector_data(fmt, o, sb, c);
      c.channel_bits.clear();
      c.channel_llr.clear();
      folder.record(std::move(c));
      ++attempts;
    }
    std::set<uint64_t> left = unverified(folder);
    size_t recovered = todo.size() - left.size();
    todo = std::move(left);
    nlohmann::json sr = {{"strategy", st.name},
                         {"captures", sub.captures.size()},
                         {"attempts", attempts},
                         {"recovered", recovered},
                         {"seconds", std::chrono::duration<double>(std::chrono::steady_clock::now() - ts).count()}};
    report.strategies.push_back(sr);
    if (options.after_strategy) options.after_strategy(sr);
  }
  if (!any_new) report.nothing_to_do = true;
  report.recovered = before - todo.size();
  return report;
}

}  // namespace salvor::pipeline
