#pragma once
// Decodes every capture of a job on a pool of threads and records the attempts in a
// decode folder in a fixed order (the capture order of the job), so the output does not
// depend on the number of threads. Also assembles run.json's provenance.

#include <functional>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "detect/plugin_host.hpp"
#include "format/track_format.hpp"
#include "pipeline/capture_decoder.hpp"
#include "pipeline/job.hpp"
#include "results/decode_folder.hpp"

namespace salvor::pipeline {

struct JobRunOptions {
  unsigned threads = 0;  // 0 = all cores
  // Called (from worker threads, serialised) after each capture: done, total.
  std::function<void(size_t, size_t)> progress;
};

struct JobRunResult {
  std::vector<CaptureSummary> captures;  // in job order
  size_t attempts = 0;
};

// Resolves the job's format: an explicit name or path, else the manifest's descriptor
// file, else the manifest's format name. Throws salvor::Error(input/usage).
format::TrackFormat resolve_job_format(const Job& job, const std::string& format_option);

// Decodes all captures of `job` and records every attempt in `folder`.
// A capture that cannot be read stops the job with its salvor::Error.
JobRunResult run_job(const Job& job, const format::TrackFormat& fmt, const detect::PluginHost& host,
                     const DecodeSettings& settings, results::DecodeFolder& folder,
                     const JobRunOptions& options);

// Decodes all captures of `job` and returns every attempt in job order (with channel
// bits when the settings keep them), and the capture summaries.
std::vector<CaptureSummary> run_job_collect(const Job& job, const format::TrackFormat& fmt,
                                            const detect::PluginHost& host, const DecodeSettings& settings,
                                            const JobRunOptions& options, std::vector<results::SectorAttempt>& out);

// The inputs of a job with their SHA-256 (captures, sidecars, manifests, descriptor).
nlohmann::json hash_inputs(const Job& job, const format::TrackFormat& fmt, unsigned threads = 0);

// Geometry of the image a format describes.
results::Geometry geometry_of(const format::TrackFormat& fmt);

nlohmann::json settings_json(const DecodeSettings& s);

}  // namespace salvor::pipeline
