#include "pipeline/job.hpp"

#include <fstream>
#include <sstream>

#include <toml++/toml.h>

#include "common/error.hpp"

namespace salvor::pipeline {

namespace fs = std::filesystem;

bool is_manifest(const fs::path& path) {
  if (path.extension() != ".json") return false;
  if (path.filename().string().size() > 5 &&
      path.filename().string().ends_with(".sigmf-meta"))
    return false;
  std::ifstream in(path);
  if (!in) return false;
  try {
    nlohmann::json j = nlohmann::json::parse(in);
    return j.is_object() && j.contains("salvor_manifest");
  } catch (const nlohmann::json::exception&) {
    return false;
  }
}

Job read_manifest(const fs::path& path) {
  const std::string where = path.string();
  std::ifstream in(path);
  if (!in) throw_input(where, "manifest missing or unreadable");
  nlohmann::json j;
  if (path.extension() == ".toml") {
    // A TOML manifest has the same keys; toml++ renders it as JSON for one code path.
    try {
      toml::table t = toml::parse(in, where);
      std::ostringstream os;
      os << toml::json_formatter{t};
      j = nlohmann::json::parse(os.str());
    } catch (const toml::parse_error& e) {
      throw_input(where, std::string("manifest is not valid TOML: ") + std::string(e.description()));
    }
  } else {
    try {
      j = nlohmann::json::parse(in);
    } catch (const nlohmann::json::exception& e) {
      throw_input(where, std::string("manifest is not valid JSON: ") + e.what());
    }
  }
  if (!j.is_object() || !j.contains("salvor_manifest"))
    throw_input(where, "not a salvor manifest (no \"salvor_manifest\" key)");
  if (!j["salvor_manifest"].is_number_integer() || j["salvor_manifest"].get<int>() != 1)
    throw_input(where, "unsupported manifest version " + j["salvor_manifest"].dump() + " (this salvor reads 1)");
  const fs::path base = path.parent_path();
  Job job;
  job.manifests.push_back(path);
  try {
    job.name = j.value("name", path.parent_path().filename().string());
    job.format = j.value("format", std::string());
    if (j.contains("format_file")) {
      job.format_file = base / j["format_file"].get<std::string>();
      if (!fs::exists(job.format_file))
        throw_input(where, "format_file '" + j["format_file"].get<std::string>() + "' does not exist");
    }
    if (!j.contains("captures") || !j["captures"].is_array())
      throw_input(where, "no \"captures\" array");
    for (const auto& c : j["captures"]) {
      JobCapture jc;
      jc.path = base / c.at("path").get<std::string>();
      if (!fs::exists(jc.path))
        throw_input(where, "lists capture '" + c.at("path").get<std::string>() + "', which does not exist");
      if (c.contains("cylinder")) jc.cylinder = c["cylinder"].get<int>();
      if (c.contains("head")) jc.head = c["head"].get<int>();
      if (c.contains("revolution")) jc.revolution = c["revolution"].get<int>();
      job.captures.push_back(std::move(jc));
    }
    if (job.captures.empty()) throw_input(where, "lists no captures");
    if (j.contains("truth")) {
      JobTruth t;
      const auto& jt = j["truth"];
      if (jt.contains("image")) t.image = base / jt["image"].get<std::string>();
      t.image_sha256 = jt.value("image_sha256", std::string());
      if (jt.contains("damage")) t.damage = base / jt["damage"].get<std::string>();
      job.truth = t;
    }
  } catch (const nlohmann::json::exception& e) {
    throw_input(where, std::string("malformed manifest: ") + e.what());
  }
  return job;
}

Job make_job(const std::vector<fs::path>& inputs) {
  if (inputs.empty()) throw_usage("decode", "no inputs given");
  Job job;
  for (const auto& in : inputs) {
    if (!fs::exists(in)) throw_input(in.string(), "no such file or folder");
    fs::path p = in;
    if (fs::is_directory(p)) {
      if (fs::exists(p / "manifest.json")) {
        p = p / "manifest.json";
      } else {
        throw_input(in.string(), "folder holds no manifest.json (name the captures or the manifest)");
      }
    }
    // A JSON input is always a manifest (captures are never JSON; a sidecar is found
    // beside its capture): read_manifest says what is wrong with it.
    if (p.extension() == ".json" || p.extension() == ".toml") {
      Job m = read_manifest(p);
      if (!job.format.empty() && !m.format.empty() && m.format != job.format)
        throw_input(p.string(), "format '" + m.format + "' differs from '" + job.format + "' of an earlier input");
      if (job.format.empty()) {
        job.format = m.format;
        job.format_file = m.format_file;
      }
      if (job.name.empty()) job.name = m.name;
      for (auto& c : m.captures) job.captures.push_back(std::move(c));
      for (auto& mf : m.manifests) job.manifests.push_back(mf);
      if (m.truth && !job.truth) job.truth = m.truth;
    } else {
      job.captures.push_back(JobCapture{p, {}, {}, {}});
    }
  }
  if (job.name.empty()) job.name = "job";
  return job;
}

}  // namespace salvor::pipeline
