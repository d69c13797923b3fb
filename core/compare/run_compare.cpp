#include "compare/run_compare.hpp"
#include "common/parallel.hpp"

#include <algorithm>
#include <atomic>
#include <chrono>
#include <exception>
#include <mutex>
#include <thread>

#include "common/error.hpp"
#include "equalize/targets.hpp"
#include "pipeline/decode_job.hpp"
#include "pipeline/job.hpp"
#include "results/decode_folder.hpp"

namespace salvor::compare {

namespace fs = std::filesystem;

uint64_t CompareResult::silent_errors() const {
  uint64_t n = 0;
  for (const auto& s : scores) n += s.silent_errors;
  return n;
}

std::vector<std::string> comparable_detectors(const detect::PluginHost& host) {
  std::vector<std::string> out;
  for (const auto* d : host.detectors())
    if (equalize::is_known_target(d->target)) out.push_back(d->name);
  return out;
}

namespace {

struct PreparedEntry {
  pipeline::Job job;
  format::TrackFormat fmt;
  std::unique_ptr<TruthImage> truth;
};

EntryScore score_group(const Corpus& corpus, const CorpusEntry& entry, const PreparedEntry& pe,
                       const detect::PluginHost& host, const std::string& detector, const CompareOptions& options) {
  pipeline::DecodeSettings s = options.settings;
  s.detector = detector;
  s.keep_channel_bits = true;
  pipeline::CaptureDecoder decoder(pe.fmt, host, s);
  std::vector<pipeline::CaptureResult> results;
  std::vector<double> seconds;
  std::vector<std::pair<int, int>> tracks;
  for (const auto& cap : pe.job.captures) {
    const auto t0 = std::chrono::steady_clock::now();
    pipeline::CaptureResult r = decoder.decode(cap);
    seconds.push_back(std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count());
    int c = cap.cylinder.value_or(r.summary.cylinder), h = cap.head.value_or(r.summary.head);
    if (c < 0 || h < 0 || c >= pe.fmt.cylinders || h >= pe.fmt.heads)
      throw_input(cap.path.string(), "capture names no valid track (cylinder/head): cannot be scored");
    tracks.emplace_back(c, h);
    results.push_back(std::move(r));
  }
  EntryScorer scorer(detector, entry.name, pe.fmt, *pe.truth, tracks);
  for (size_t i = 0; i < results.size(); ++i)
    scorer.add_capture(results[i].sectors, results[i].summary.samples, seconds[i]);
  EntryScore score = scorer.finish();

  if (options.keep_decodes) {
    results::DecodeFolder folder(*options.keep_decodes / detector / entry.name, pipeline::geometry_of(pe.fmt));
    for (auto& r : results)
      for (auto& a : r.sectors) {
        a.channel_bits.clear();
        folder.record(std::move(a));
      }
    auto& run = folder.run_info();
    run["salvor_run"] = 1;
    run["command"] = "compare";
    run["corpus"] = {{"name", corpus.name}, {"definition", fs::absolute(corpus.definition).string()}};
    run["entry"] = entry.name;
    run["format"] = {{"name", pe.fmt.name}, {"path", pe.fmt.source.string()}};
    run["settings"] = pipeline::settings_json(s);
    run["inputs"] = pipeline::hash_inputs(pe.job, pe.fmt);
    nlohmann::json caps = nlohmann::json::array();
    for (const auto& r : results) caps.push_back(r.summary.to_json());
    run["captures"] = caps;
    folder.write(results::FillPolicy{});
  }
  return score;
}

}  // namespace

CompareResult run_compare(const Corpus& corpus, const detect::PluginHost& host, const CompareOptions& options) {
  if (options.detectors.empty()) throw_usage("--detectors", "no detectors to compare");
  for (const auto& d : options.detectors) {
    const auto* info = host.find(d);
    if (!info) throw_usage("--detectors", "no detector plugin named '" + d + "' (see salvor plugins)");
    if (!equalize::is_known_target(info->target))
      throw_usage("--detectors", "detector '" + d + "' wants target '" + info->target + "', which the pipeline cannot deliver");
  }
  // Every entry's job, format and truth, checked before any decoding starts.
  std::vector<PreparedEntry> prepared;
  for (const auto& e : corpus.entries) {
    PreparedEntry pe{pipeline::read_manifest(e.manifest), {}, nullptr};
    pe.fmt = pipeline::resolve_job_format(pe.job, "");
    if (!corpus.format.empty() && pe.fmt.name != corpus.format)
      throw_input(e.manifest.string(), "format '" + pe.fmt.name + "' is not the corpus format '" + corpus.format + "'");
    if (!pe.job.truth) throw_input(e.manifest.string(), "no \"truth\": a corpus entry needs its true image");
    pe.truth = std::make_unique<TruthImage>(pe.job.truth->image, pe.fmt, pe.job.truth->image_sha256);
    prepared.push_back(std::move(pe));
  }

  const size_t ne = corpus.entries.size(), nd = options.detectors.size(), n = ne * nd;
  CompareResult out;
  out.detectors = options.detectors;
  out.scores.resize(n);
  parallel_for(
      n, options.threads,
      [&](size_t g) {
        const size_t d = g / ne, e = g % ne;
        out.scores[g] = score_group(corpus, corpus.entries[e], prepared[e], host, options.detectors[d], options);
      },
      options.progress ? std::function<void(size_t, size_t)>(options.progress) : std::function<void(size_t, size_t)>{});
  return out;
}

}  // namespace salvor::compare
