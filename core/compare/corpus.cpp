#include "compare/corpus.hpp"

#include <cmath>
#include <fstream>
#include <set>

#include <nlohmann/json.hpp>

#include "common/error.hpp"

namespace salvor::compare {

namespace fs = std::filesystem;

bool CorpusEntry::in_sweep(const std::string& s) const {
  for (const auto& w : sweeps)
    if (w == s) return true;
  return false;
}

namespace {

bool valid_name(const std::string& s) {
  if (s.empty() || s.size() > 64) return false;
  for (char c : s)
    if (!(std::isalnum(static_cast<unsigned char>(c)) || c == '.' || c == '_' || c == '-')) return false;
  return s != "." && s != "..";
}

double finite_number(const nlohmann::json& e, const char* key, const std::string& where) {
  if (!e.contains(key) || !e[key].is_number()) throw_input(where, std::string("\"") + key + "\" missing or not a number");
  double v = e[key].get<double>();
  if (!std::isfinite(v)) throw_input(where, std::string("\"") + key + "\" is not finite");
  return v;
}

}  // namespace

Corpus read_corpus(const fs::path& path) {
  fs::path file = fs::is_directory(path) ? path / "corpus.json" : path;
  std::ifstream in(file);
  if (!in) throw_input(file.string(), fs::is_directory(path) ? "no corpus.json in this folder: not a corpus"
                                                             : "missing or unreadable");
  nlohmann::json j;
  try {
    j = nlohmann::json::parse(in);
  } catch (const nlohmann::json::exception& e) {
    throw_input(file.string(), std::string("not valid JSON: ") + e.what());
  }
  const std::string w = file.string();
  if (!j.is_object() || !j.contains("salvor_corpus")) throw_input(w, "no \"salvor_corpus\" key: not a corpus definition");
  if (!j["salvor_corpus"].is_number_integer() || j["salvor_corpus"].get<int>() != 1)
    throw_input(w, "salvor_corpus " + j["salvor_corpus"].dump() + " is not a version this salvor reads (1)");
  Corpus c;
  c.definition = file;
  try {
    c.name = j.at("name").get<std::string>();
    c.description = j.value("description", std::string());
    c.format = j.value("format", std::string());
    if (!valid_name(c.name)) throw_input(w, "name '" + c.name + "' must be 1..64 of [A-Za-z0-9._-]");
    const auto& entries = j.at("entries");
    if (!entries.is_array() || entries.empty()) throw_input(w, "\"entries\" must be a non-empty array");
    std::set<std::string> names;
    for (size_t i = 0; i < entries.size(); ++i) {
      const auto& e = entries[i];
      const std::string ew = w + ": entries[" + std::to_string(i) + "]";
      if (!e.is_object()) throw_input(ew, "not an object");
      CorpusEntry ce;
      ce.name = e.at("name").get<std::string>();
      if (!valid_name(ce.name)) throw_input(ew, "name '" + ce.name + "' must be 1..64 of [A-Za-z0-9._-]");
      if (!names.insert(ce.name).second) throw_input(ew, "entry name '" + ce.name + "' appears twice");
      const std::string folder = e.value("folder", ce.name);
      if (!valid_name(folder)) throw_input(ew, "folder '" + folder + "' must be a plain folder name");
      ce.manifest = file.parent_path() / folder / "manifest.json";
      if (!fs::is_regular_file(ce.manifest))
        throw_input(ce.manifest.string(), "missing: entry '" + ce.name + "' of the corpus was not built");
      ce.description = e.value("description", std::string());
      ce.scenario = e.value("scenario", std::string());
      ce.seed = e.value("seed", uint64_t{0});
      ce.tracks = e.value("tracks", std::string());
      ce.sweeps = e.value("sweeps", std::vector<std::string>{});
      ce.density = finite_number(e, "density", ew);
      ce.snr_db = finite_number(e, "snr_db", ew);
      ce.jitter_bits = e.contains("jitter_bits") ? finite_number(e, "jitter_bits", ew) : 0.0;
      ce.jitter_share = e.contains("jitter_share") ? finite_number(e, "jitter_share", ew) : 0.0;
      if (!(ce.density > 0)) throw_input(ew, "density must be positive");
      ce.damage = e.value("damage", std::string("none"));
      c.entries.push_back(std::move(ce));
    }
  } catch (const nlohmann::json::exception& e) {
    throw_input(w, std::string("malformed corpus definition: ") + e.what());
  }
  return c;
}

}  // namespace salvor::compare
