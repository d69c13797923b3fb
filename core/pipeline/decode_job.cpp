#include "pipeline/decode_job.hpp"

#include <atomic>
#include <condition_variable>
#include <memory>
#include <exception>
#include <filesystem>
#include <mutex>
#include <thread>

#include "common/error.hpp"
#include "common/parallel.hpp"
#include "common/sha256.hpp"
#include "load/capture_reader.hpp"

namespace salvor::pipeline {

namespace fs = std::filesystem;

format::TrackFormat resolve_job_format(const Job& job, const std::string& format_option) {
  if (!format_option.empty()) return format::load_track_format(format::find_track_format(format_option));
  if (!job.format_file.empty()) return format::load_track_format(job.format_file);
  if (!job.format.empty()) return format::load_track_format(format::find_track_format(job.format));
  // Captures named directly: their sidecar says which format they are in.
  if (!job.captures.empty()) {
    load::CaptureReader r = load::open_capture(job.captures.front().path);
    if (!r.info().format.empty()) return format::load_track_format(format::find_track_format(r.info().format));
  }
  throw_usage("decode", "the inputs do not say which track format they are in: give --format");
}

// With at least two threads per capture, each capture splits its own decode in two
// (front end | framer): a job of one long capture still uses both cores.
static bool spare_core_per_capture(size_t captures, unsigned threads) {
  if (threads == 0) threads = std::max(1u, std::thread::hardware_concurrency());  // 0 = all cores
  return captures > 0 && threads >= 2 * captures;
}

results::Geometry geometry_of(const format::TrackFormat& fmt) {
  return results::Geometry{fmt.heads, fmt.cylinders, fmt.sectors_per_track, fmt.user_bytes};
}

std::vector<CaptureSummary> run_job_collect(const Job& job, const format::TrackFormat& fmt,
                                            const detect::PluginHost& host, const DecodeSettings& settings,
                                            const JobRunOptions& options, std::vector<results::SectorAttempt>& out) {
  const size_t n = job.captures.size();
  std::vector<CaptureResult> results(n);
  // A CaptureDecoder only holds settings (each decode makes its own stage objects), so
  // one per capture costs nothing and shares nothing between threads.
  parallel_for(
      n, options.threads,
      [&](size_t i) {
        CaptureDecoder decoder(fmt, host, settings);
        decoder.set_front_end_thread(spare_core_per_capture(n, options.threads));
        results[i] = decoder.decode(job.captures[i]);
      },
      options.progress);

  std::vector<CaptureSummary> summaries;
  for (auto& r : results) {
    for (auto& a : r.sectors) out.push_back(std::move(a));
    summaries.push_back(std::move(r.summary));
  }
  return summaries;
}

namespace {

// Hands sector attempts to the folder in job order (capture by capture, each capture's
// attempts in the order it made them), whatever the thread count, without holding a
// whole capture's attempts: the earliest unfinished capture (the head) records straight
// into the folder; captures behind it keep theirs until the head reaches them. A capture
// behind the head that has buffered more than `limit` attempts waits for the head, so
// memory stays bounded however long a capture is.
class OrderedRecorder {
 public:
  OrderedRecorder(results::DecodeFolder& folder, size_t captures, size_t limit)
      : folder_(folder), pending_(captures), finished_(captures, false), limit_(limit) {}

  void add(size_t capture, results::SectorAttempt&& a) {
    std::string line = results::to_json(a).dump();  // rendered outside the lock
    std::unique_lock<std::mutex> lock(mu_);
    if (capture != head_ && pending_[capture].size() >= limit_)
      moved_.wait(lock, [&] { return capture == head_ || aborted_; });
    if (aborted_) throw_internal("decode stopped: another capture failed");
    if (capture == head_) {
      folder_.record(std::move(a), line);
      ++recorded_;
    } else {
      pending_[capture].push_back({std::move(a), std::move(line)});
    }
  }

  void finish(size_t capture) {
    std::lock_guard<std::mutex> lock(mu_);
    finished_[capture] = true;
    while (head_ < finished_.size() && finished_[head_]) {
      ++head_;
      if (head_ < pending_.size()) {
        for (auto& [a, line] : pending_[head_]) {
          folder_.record(std::move(a), line);
          ++recorded_;
        }
        pending_[head_] = {};
      }
    }
    moved_.notify_all();
  }

  // Another capture failed: wake every waiting worker so that the job can stop.
  void abort() {
    std::lock_guard<std::mutex> lock(mu_);
    aborted_ = true;
    moved_.notify_all();
  }

  size_t recorded() const { return recorded_; }

 private:
  results::DecodeFolder& folder_;
  std::mutex mu_;
  std::condition_variable moved_;
  std::vector<std::vector<std::pair<results::SectorAttempt, std::string>>> pending_;
  std::vector<bool> finished_;
  size_t head_ = 0;
  size_t limit_;
  size_t recorded_ = 0;
  bool aborted_ = false;
};

}  // namespace

JobRunResult run_job(const Job& job, const format::TrackFormat& fmt, const detect::PluginHost& host,
                     const DecodeSettings& settings, results::DecodeFolder& folder,
                     const JobRunOptions& options) {
  const size_t n = job.captures.size();
  // 4096 attempts are a few MiB: enough that a worker rarely waits for the head.
  OrderedRecorder recorder(folder, n, 4096);
  std::vector<CaptureSummary> summaries(n);
  parallel_for(
      n, options.threads,
      [&](size_t i) {
        const SectorSink sink = [&recorder, i](results::SectorAttempt&& a) { recorder.add(i, std::move(a)); };
        try {
          CaptureDecoder decoder(fmt, host, settings);
          decoder.set_front_end_thread(spare_core_per_capture(n, options.threads));
          summaries[i] = decoder.decode(job.captures[i], {}, nullptr, sink).summary;
        } catch (...) {
          recorder.abort();
          throw;
        }
        recorder.finish(i);
      },
      options.progress);
  JobRunResult out;
  out.captures = std::move(summaries);
  out.attempts = recorder.recorded();
  return out;
}

nlohmann::json hash_inputs(const Job& job, const format::TrackFormat& fmt, unsigned threads) {
  // The list first, in a fixed order; then the hashes, one file per worker at a time
  // (reading and hashing gigabytes is the decode's longest serial step otherwise).
  std::vector<std::pair<fs::path, const char*>> files;
  for (const auto& m : job.manifests) files.emplace_back(m, "manifest");
  if (!fmt.source.empty() && fs::exists(fmt.source)) files.emplace_back(fmt.source, "format");
  for (const auto& c : job.captures) {
    files.emplace_back(c.path, "capture");
    fs::path side = c.path;
    side += ".json";
    if (fs::exists(side)) files.emplace_back(side, "sidecar");
    if (c.path.extension() == ".sigmf-data") {
      fs::path meta = c.path;
      meta.replace_extension(".sigmf-meta");
      if (fs::exists(meta)) files.emplace_back(meta, "sidecar");
    }
  }
  std::vector<std::string> sha(files.size());
  parallel_for(files.size(), threads, [&](size_t i) { sha[i] = sha256_file_hex(files[i].first); });
  nlohmann::json in = nlohmann::json::array();
  for (size_t i = 0; i < files.size(); ++i) {
    const auto& [p, role] = files[i];
    in.push_back({{"path", fs::absolute(p).lexically_normal().string()},
                  {"role", role},
                  {"sha256", sha[i]},
                  {"bytes", fs::file_size(p)}});
  }
  return in;
}

nlohmann::json settings_json(const DecodeSettings& s) {
  nlohmann::json p = nlohmann::json::object();
  for (const auto& [k, v] : s.detector_params) p[k] = v;
  nlohmann::json j = {{"detector", s.detector},
                      {"detector_params", p},
                      {"target", s.target},
                      {"gpr_length", s.gpr_length},
                      {"coarse_detector", s.coarse_detector},
                      {"samples_per_bit", s.samples_per_bit},
                      {"pll_acquire_bandwidth", s.pll_acquire_bandwidth},
                      {"pll_track_bandwidth", s.pll_track_bandwidth},
                      {"pw50_bits", s.pw50_bits},
                      {"design_snr_db", s.design_snr_db},
                      {"equalizer_taps", s.equalizer_taps},
                      {"equalizer_step", s.equalizer_step},
                      {"training_epochs", s.training_epochs},
                      {"sync_tolerance", s.sync_tolerance},
                      {"erasure_search", s.erasure_search},
                      {"chase_bits", s.chase_bits}};
  if (s.bit_rate_hz) j["bit_rate_hz"] = *s.bit_rate_hz;
  return j;
}

}  // namespace salvor::pipeline
