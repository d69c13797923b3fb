#pragma once
// A decode job: the captures to decode and the format they are in, read from a
// manifest (manifest.json) or from capture files named on the command line. Paths in
// a manifest are relative to the manifest's folder.

#include <cstdint>
#include <filesystem>
#include <optional>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

namespace salvor::pipeline {

struct JobCapture {
  std::filesystem::path path;     // absolute or relative to the working directory
  std::optional<int> cylinder;    // from the manifest (else from the sidecar)
  std::optional<int> head;
  std::optional<int> revolution;
};

struct JobTruth {                 // corpora and simulator output only
  std::filesystem::path image;
  std::string image_sha256;
  std::filesystem::path damage;
};

struct Job {
  std::string name;
  std::vector<std::filesystem::path> manifests;  // every manifest read (hashed in run.json)
  std::string format;                            // descriptor name or path ("" = from sidecars)
  std::filesystem::path format_file;             // a descriptor file named by the manifest, if any
  std::vector<JobCapture> captures;
  std::optional<JobTruth> truth;
};

// True if `path` looks like a manifest (a .json/.toml file with a top-level
// "salvor_manifest" key), as opposed to a capture or a capture's sidecar.
bool is_manifest(const std::filesystem::path& path);

// Reads one manifest. Throws salvor::Error(input) naming the manifest on a malformed
// file, a capture listed but not present, or an empty capture list.
Job read_manifest(const std::filesystem::path& path);

// Builds one job from command-line inputs: manifests and capture files (a folder is
// searched for a manifest.json). Throws salvor::Error(input) on an empty folder, a
// missing file, or manifests of different formats.
Job make_job(const std::vector<std::filesystem::path>& inputs);

}  // namespace salvor::pipeline
