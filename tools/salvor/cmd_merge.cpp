// salvor merge DIR... --out DIR: the best result of every sector across decode folders of
// one format and geometry (shards of a job, runs on other days, runs with other detectors).
//
// Rule, per sector:
//   1. a verified result (good/corrected) beats an unverified one;
//   2. among equals, the higher confidence wins; a tie goes to the earlier folder on the
//      command line (the order of better_than in core/results);
//   3. two verified results with different bytes make the sector `conflict`: neither is
//      trusted alone. image.bin then holds the bytes of the verified result that rule 2
//      would have chosen, the map says conflict, and the log keeps both attempts plus one
//      line from the merge naming each source's SHA-256 of the bytes.
//   A sector that is already `conflict` in a source stays `conflict`.
// Every source is checked against its own run.json first: a folder whose files do not
// match the SHA-256 recorded there was changed after it was written and is refused.

#include <filesystem>
#include <fstream>
#include <iostream>
#include <map>
#include <set>
#include <span>

#include "cli_common.hpp"
#include "common/error.hpp"
#include "common/sha256.hpp"
#include "common/version.hpp"
#include "results/confidence.hpp"
#include "results/decode_folder.hpp"

namespace salvor::cli {

// Defined in cmd_decode.cpp: prints a folder's summary, returns 0 or 4.
int print_folder_summary(const results::DecodeFolder& folder, const std::string& image_sha, bool as_json,
                         const nlohmann::json& extra);

namespace fs = std::filesystem;

namespace {

constexpr const char* kFolderFiles[] = {"image.bin", "sectors.jsonl", "damage-map.json", "damage-map.svg"};

nlohmann::json read_run_json(const fs::path& dir) {
  const fs::path p = dir / "run.json";
  std::ifstream in(p);
  if (!in) throw_input(p.string(), "missing or unreadable: not a decode folder");
  try {
    return nlohmann::json::parse(in);
  } catch (const nlohmann::json::exception& e) {
    throw_input(p.string(), std::string("not valid JSON: ") + e.what());
  }
}

// Checks every output file of a source against the SHA-256 and size its run.json recorded.
// Returns the files with their hashes for the merged run.json.
nlohmann::json verify_source_files(const fs::path& dir, const nlohmann::json& run) {
  const fs::path run_path = dir / "run.json";
  if (!run.is_object() || !run.contains("outputs") || !run["outputs"].is_object())
    throw_input(run_path.string(), "no \"outputs\" with the SHA-256 of the folder's files: refused");
  nlohmann::json files = nlohmann::json::object();
  for (const char* name : kFolderFiles) {
    const fs::path p = dir / name;
    const auto& rec = run["outputs"];
    if (!rec.contains(name) || !rec[name].is_object() || !rec[name].contains("sha256") ||
        !rec[name]["sha256"].is_string())
      throw_input(run_path.string(), std::string("outputs lists no SHA-256 for ") + name + ": refused");
    if (!fs::is_regular_file(p)) throw_input(p.string(), "missing (run.json lists it): refused");
    const std::string want = rec[name]["sha256"].get<std::string>();
    const std::string got = sha256_file_hex(p);
    if (got != want)
      throw_input(p.string(), "SHA-256 " + got.substr(0, 16) + "... does not match " + want.substr(0, 16) +
                                  "... recorded in run.json: the folder was changed after it was written "
                                  "(tampered or corrupt), refused");
    const uint64_t bytes = fs::file_size(p);
    if (rec[name].contains("bytes") && rec[name]["bytes"].is_number_unsigned() &&
        rec[name]["bytes"].get<uint64_t>() != bytes)
      throw_input(p.string(), "size " + std::to_string(bytes) + " bytes differs from run.json: refused");
    files[name] = {{"sha256", got}, {"bytes", bytes}};
  }
  files["run.json"] = {{"sha256", sha256_file_hex(run_path)}, {"bytes", fs::file_size(run_path)}};
  return files;
}

std::string format_name(const nlohmann::json& run) {
  if (run.contains("format") && run["format"].is_object() && run["format"].contains("name") &&
      run["format"]["name"].is_string())
    return run["format"]["name"].get<std::string>();
  return "";
}

std::string geometry_text(const results::Geometry& g) {
  return std::to_string(g.cylinders) + " cylinders x " + std::to_string(g.heads) + " heads x " +
         std::to_string(g.sectors_per_track) + " sectors of " + std::to_string(g.sector_bytes) + " bytes";
}

bool same_geometry(const results::Geometry& a, const results::Geometry& b) {
  return a.heads == b.heads && a.cylinders == b.cylinders && a.sectors_per_track == b.sectors_per_track &&
         a.sector_bytes == b.sector_bytes;
}

struct Source {
  fs::path dir;
  std::string label;  // as given on the command line (log tag)
  nlohmann::json run;
  nlohmann::json files;
  std::optional<results::DecodeFolder> folder;
};

std::string bytes_sha(const std::vector<uint8_t>& d) {
  return sha256_hex(std::as_bytes(std::span<const uint8_t>(d)));
}

}  // namespace

int run_merge(const std::vector<std::string>& args) {
  return guarded("merge", [&]() {
    std::vector<std::string> inputs;
    std::string out;
    bool json = false;
    po::options_description o("merge options");
    o.add_options()
        ("out,o", po::value(&out)->required(), "output folder (must not hold an earlier decode)")
        ("json", po::bool_switch(&json), "print the summary as JSON");
    o.add_options()("inputs", po::value(&inputs)->multitoken(), "decode folders to merge");
    po::positional_options_description pos;
    pos.add("inputs", -1);
    po::variables_map vm;
    if (!parse_command_line("merge", "DIR... --out DIR [--json]", args, o, pos, vm)) return static_cast<int>(exit_ok);
    if (inputs.empty()) throw Error(ErrorKind::usage, "salvor merge", "no decode folders to merge");

    const fs::path out_dir = out;
    if (fs::exists(out_dir / "run.json") || fs::exists(out_dir / "image.bin"))
      throw Error(ErrorKind::usage, out_dir.string(), "already holds a decode; choose another --out");

    // Read and check every source before anything is written.
    std::vector<Source> sources;
    std::set<fs::path> seen;
    for (const auto& in : inputs) {
      Source s;
      s.dir = in;
      s.label = in;
      if (!fs::is_directory(s.dir)) throw_input(in, "not a decode folder (no such directory)");
      fs::path canon = fs::weakly_canonical(s.dir);
      if (!seen.insert(canon).second) throw Error(ErrorKind::usage, in, "named twice");
      s.run = read_run_json(s.dir);
      s.files = verify_source_files(s.dir, s.run);
      s.folder.emplace(results::DecodeFolder::open(s.dir));
      sources.push_back(std::move(s));
    }
    const results::Geometry g = sources.front().folder->geometry();
    const std::string fmt = format_name(sources.front().run);
    for (size_t i = 1; i < sources.size(); ++i) {
      const auto& gi = sources[i].folder->geometry();
      if (!same_geometry(g, gi))
        throw_input(sources[i].label, "geometry " + geometry_text(gi) + " differs from " + sources.front().label +
                                          " (" + geometry_text(g) + "): folders of different drives cannot be merged");
      const std::string fi = format_name(sources[i].run);
      if (!fmt.empty() && !fi.empty() && fi != fmt)
        throw_input(sources[i].label, "format '" + fi + "' differs from " + sources.front().label + " ('" + fmt +
                                          "'): folders of different formats cannot be merged");
    }

    results::DecodeFolder merged(out_dir, g);

    // The log: every source's attempts, in command-line order, tagged with the source.
    for (const auto& s : sources) {
      for (const auto& line : s.folder->logged_lines()) {
        nlohmann::json j = nlohmann::json::parse(line);  // open() has parsed it already
        if (j.contains("source")) j["via"] = j["source"];
        j["source"] = s.label;
        merged.append_log_line(j);
      }
    }

    // Final results.
    uint64_t conflicts = 0;
    std::vector<uint64_t> conflict_lbas;
    for (uint64_t lba = 0; lba < g.total_sectors(); ++lba) {
      const results::SectorAttempt* best = nullptr;
      size_t best_src = 0;
      bool inherited_conflict = false;
      std::map<std::string, std::vector<size_t>> verified_by_content;  // bytes sha -> sources
      for (size_t i = 0; i < sources.size(); ++i) {
        const auto& a = sources[i].folder->final_attempt(lba);
        if (a.status == results::SectorStatus::conflict) inherited_conflict = true;
        if (results::is_verified(a.status)) verified_by_content[bytes_sha(a.data)].push_back(i);
        if (!best || results::better_than(a, *best)) {
          best = &a;
          best_src = i;
        }
      }
      results::SectorAttempt fin = *best;
      fin.notes.push_back("merge: from " + sources[best_src].label);
      const bool conflict = inherited_conflict || verified_by_content.size() > 1;
      if (conflict) {
        if (inherited_conflict && verified_by_content.empty()) {
          // No verified result anywhere: keep the bytes the conflicting source holds.
          for (size_t i = 0; i < sources.size(); ++i)
            if (sources[i].folder->final_attempt(lba).status == results::SectorStatus::conflict) {
              fin = sources[i].folder->final_attempt(lba);
              best_src = i;
              break;
            }
        }
        fin.status = results::SectorStatus::conflict;
        fin.confidence = results::sector_confidence(fin);
        fin.attempt = "merge";
        std::string who;
        for (const auto& [sha, srcs] : verified_by_content)
          for (size_t i : srcs) who += " " + sources[i].label + "=" + sha.substr(0, 16);
        fin.notes.push_back(verified_by_content.size() > 1
                                ? "conflict: verified contents differ:" + who + "; image holds " +
                                      sources[best_src].label + "'s bytes"
                                : "conflict: already a conflict in a source");
        nlohmann::json line = results::to_json(fin);
        line["source"] = "merge";
        merged.append_log_line(line);
        ++conflicts;
        conflict_lbas.push_back(lba);
      }
      merged.set_final(std::move(fin));
    }

    nlohmann::json& run = merged.run_info();
    run["salvor_run"] = 1;
    run["command"] = "merge";
    run["salvor_version"] = version_string();
    run["arguments"] = args;
    if (sources.front().run.contains("format")) run["format"] = sources.front().run["format"];
    run["geometry"] = {{"heads", g.heads}, {"cylinders", g.cylinders}, {"sectors_per_track", g.sectors_per_track},
                       {"sector_bytes", g.sector_bytes}};
    nlohmann::json srcs = nlohmann::json::array();
    for (const auto& s : sources)
      srcs.push_back({{"path", fs::weakly_canonical(s.dir).string()},
                      {"given_as", s.label},
                      {"command", s.run.value("command", std::string())},
                      {"salvor_version", s.run.value("salvor_version", std::string())},
                      {"files", s.files}});
    run["sources"] = srcs;
    run["merge"] = {{"rule", "verified beats unverified, then higher confidence, ties to the earlier source; "
                             "verified results with different bytes become conflict"},
                    {"conflict_image", "bytes of the verified result the rule would have chosen"},
                    {"conflicts", conflicts}};
    results::FillPolicy fill;
    const auto& r0 = sources.front().run;
    if (r0.contains("fill") && r0["fill"].is_object()) {
      fill.fill_unverified = r0["fill"].value("fill_unverified", false);
      fill.fill_byte = r0["fill"].value("fill_byte", -1);
    }
    run["fill"] = {{"fill_unverified", fill.fill_unverified}, {"fill_byte", fill.fill_byte}};
    const std::string sha = merged.write(fill);

    if (conflicts) {
      std::cerr << "salvor merge: " << conflicts << " sector(s) in conflict (verified results disagree):";
      size_t shown = 0;
      for (uint64_t lba : conflict_lbas) {
        if (++shown > 20) {
          std::cerr << " ...";
          break;
        }
        std::cerr << " " << lba;
      }
      std::cerr << "\n";
    }
    return print_folder_summary(merged, sha, json, {{"sources", sources.size()}, {"conflicts", conflicts}});
  });
}

}  // namespace salvor::cli
