#include "pipeline/decode_job.hpp"

#include <atomic>
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
      [&](size_t i) { results[i] = CaptureDecoder(fmt, host, settings).decode(job.captures[i]); }, options.progress);

  std::vector<CaptureSummary> summaries;
  for (auto& r : results) {
    for (auto& a : r.sectors) out.push_back(std::move(a));
    summaries.push_back(std::move(r.summary));
  }
  return summaries;
}

JobRunResult run_job(const Job& job, const format::TrackFormat& fmt, const detect::PluginHost& host,
                     const DecodeSettings& settings, results::DecodeFolder& folder,
                     const JobRunOptions& options) {
  std::vector<results::SectorAttempt> attempts;
  JobRunResult out;
  out.captures = run_job_collect(job, fmt, host, settings, options, attempts);
  for (auto& a : attempts) {
    folder.record(std::move(a));
    ++out.attempts;
  }
  return out;
}

nlohmann::json hash_inputs(const Job& job, const format::TrackFormat& fmt) {
  nlohmann::json in = nlohmann::json::array();
  auto add = [&](const fs::path& p, const char* role) {
    in.push_back({{"path", fs::absolute(p).lexically_normal().string()},
                  {"role", role},
                  {"sha256", sha256_file_hex(p)},
                  {"bytes", fs::file_size(p)}});
  };
  for (const auto& m : job.manifests) add(m, "manifest");
  if (!fmt.source.empty() && fs::exists(fmt.source)) add(fmt.source, "format");
  for (const auto& c : job.captures) {
    add(c.path, "capture");
    fs::path side = c.path;
    side += ".json";
    if (fs::exists(side)) add(side, "sidecar");
    if (c.path.extension() == ".sigmf-data") {
      fs::path meta = c.path;
      meta.replace_extension(".sigmf-meta");
      if (fs::exists(meta)) add(meta, "sidecar");
    }
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
