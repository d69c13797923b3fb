#include "pipeline/decode_job.hpp"

#include <atomic>
#include <exception>
#include <filesystem>
#include <mutex>
#include <thread>

#include "common/error.hpp"
#include "common/sha256.hpp"

namespace salvor::pipeline {

namespace fs = std::filesystem;

format::TrackFormat resolve_job_format(const Job& job, const std::string& format_option) {
  if (!format_option.empty()) return format::load_track_format(format::find_track_format(format_option));
  if (!job.format_file.empty()) return format::load_track_format(job.format_file);
  if (!job.format.empty()) return format::load_track_format(format::find_track_format(job.format));
  throw_usage("decode", "the inputs do not say which track format they are in: give --format");
}

results::Geometry geometry_of(const format::TrackFormat& fmt) {
  return results::Geometry{fmt.heads, fmt.cylinders, fmt.sectors_per_track, fmt.user_bytes};
}

JobRunResult run_job(const Job& job, const format::TrackFormat& fmt, const detect::PluginHost& host,
                     const DecodeSettings& settings, results::DecodeFolder& folder,
                     const JobRunOptions& options) {
  const size_t n = job.captures.size();
  std::vector<CaptureResult> results(n);
  unsigned threads = options.threads ? options.threads : std::max(1u, std::thread::hardware_concurrency());
  threads = static_cast<unsigned>(std::min<size_t>(threads, n));
  std::atomic<size_t> next{0};
  std::atomic<bool> failed{false};
  std::exception_ptr first_error;
  std::mutex mu;
  size_t done = 0;

  auto worker = [&]() {
    try {
      CaptureDecoder decoder(fmt, host, settings);
      while (!failed) {
        size_t i = next++;
        if (i >= n) break;
        results[i] = decoder.decode(job.captures[i]);
        std::lock_guard<std::mutex> lock(mu);
        ++done;
        if (options.progress) options.progress(done, n);
      }
    } catch (...) {
      std::lock_guard<std::mutex> lock(mu);
      if (!first_error) first_error = std::current_exception();
      failed = true;
    }
  };
  std::vector<std::thread> pool;
  for (unsigned t = 1; t < threads; ++t) pool.emplace_back(worker);
  worker();
  for (auto& t : pool) t.join();
  if (first_error) std::rethrow_exception(first_error);

  JobRunResult out;
  for (auto& r : results) {
    for (auto& a : r.sectors) {
      folder.record(std::move(a));
      ++out.attempts;
    }
    out.captures.push_back(std::move(r.summary));
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
                      {"erasure_search", s.erasure_search}};
  if (s.bit_rate_hz) j["bit_rate_hz"] = *s.bit_rate_hz;
  return j;
}

}  // namespace salvor::pipeline
