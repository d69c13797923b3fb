#include "results/decode_folder.hpp"

#include <cstdio>
#include <fstream>
#include <sstream>

#include "common/atomic_file.hpp"
#include "common/error.hpp"
#include "common/sha256.hpp"

namespace salvor::results {

namespace fs = std::filesystem;

std::vector<uint8_t> fill_pattern(uint64_t lba, int sector_bytes, const FillPolicy& policy,
                                  const char* what) {
  std::vector<uint8_t> out(static_cast<size_t>(sector_bytes));
  if (policy.fill_byte >= 0) {
    std::fill(out.begin(), out.end(), static_cast<uint8_t>(policy.fill_byte));
    return out;
  }
  std::string marker = std::string("<salvor ") + what + " lba=" + std::to_string(lba) + "> ";
  for (size_t i = 0; i < out.size(); ++i) out[i] = static_cast<uint8_t>(marker[i % marker.size()]);
  return out;
}

DecodeFolder::DecodeFolder(fs::path dir, Geometry geometry)
    : dir_(std::move(dir)), geometry_(geometry) {
  if (geometry_.total_sectors() == 0 || geometry_.sector_bytes <= 0)
    throw_usage(dir_.string(), "empty geometry for the output image");
  final_.resize(geometry_.total_sectors());
  uint64_t lba = 0;
  for (int c = 0; c < geometry_.cylinders; ++c)
    for (int h = 0; h < geometry_.heads; ++h)
      for (int s = 0; s < geometry_.sectors_per_track; ++s, ++lba) {
        SectorAttempt& a = final_[lba];
        a.lba = lba;
        a.cylinder = c;
        a.head = h;
        a.sector = s;
        a.status = SectorStatus::missing;
        a.attempt = "none";
        a.confidence = 0.0;
      }
}

static nlohmann::json read_json_file(const fs::path& p) {
  std::ifstream in(p);
  if (!in) throw_input(p.string(), "missing or unreadable");
  try {
    return nlohmann::json::parse(in);
  } catch (const nlohmann::json::exception& e) {
    throw_input(p.string(), std::string("not valid JSON: ") + e.what());
  }
}

DecodeFolder DecodeFolder::open(const fs::path& dir) {
  if (!fs::is_directory(dir)) throw_input(dir.string(), "not a decode folder (no such directory)");
  if (!fs::exists(dir / "damage-map.json") && !fs::exists(dir / "run.json"))
    throw_input(dir.string(), "not a decode folder (no damage-map.json or run.json: make one with salvor decode)");
  nlohmann::json map = read_json_file(dir / "damage-map.json");
  Geometry g;
  try {
    const auto& jg = map.at("geometry");
    g.heads = jg.at("heads").get<int>();
    g.cylinders = jg.at("cylinders").get<int>();
    g.sectors_per_track = jg.at("sectors_per_track").get<int>();
    g.sector_bytes = jg.at("sector_bytes").get<int>();
  } catch (const nlohmann::json::exception& e) {
    throw_input((dir / "damage-map.json").string(), std::string("no valid geometry: ") + e.what());
  }
  DecodeFolder f(dir, g);
  f.run_ = read_json_file(dir / "run.json");

  // The log: keep every line; the final attempt of each sector is the one the map names.
  std::ifstream log(dir / "sectors.jsonl");
  if (!log) throw_input((dir / "sectors.jsonl").string(), "missing or unreadable");
  std::string line;
  size_t lineno = 0;
  while (std::getline(log, line)) {
    ++lineno;
    if (line.empty()) continue;
    try {
      SectorAttempt a = attempt_from_json(nlohmann::json::parse(line));
      if (a.lba >= f.final_.size())
        throw_input((dir / "sectors.jsonl").string(),
                    "line " + std::to_string(lineno) + ": lba " + std::to_string(a.lba) + " outside the image");
      if (better_than(a, f.final_[a.lba])) f.final_[a.lba] = std::move(a);
    } catch (const nlohmann::json::exception& e) {
      throw_input((dir / "sectors.jsonl").string(),
                  "line " + std::to_string(lineno) + " is not valid JSON: " + e.what());
    }
  }
  f.log_on_disk_ = true;
  // Statuses set by a merge (conflict) live in the map, not in any single attempt.
  for (const auto& s : map.at("sectors")) {
    uint64_t lba = s.at("lba").get<uint64_t>();
    if (lba < f.final_.size() && s.at("status").get<std::string>() == "conflict") {
      f.final_[lba].status = SectorStatus::conflict;
      f.final_[lba].confidence = s.value("confidence", 0.25);
    }
  }

  // The image: the bytes of every sector as last written.
  fs::path img = dir / "image.bin";
  std::ifstream in(img, std::ios::binary);
  if (!in) throw_input(img.string(), "missing or unreadable");
  uint64_t expect = g.total_sectors() * static_cast<uint64_t>(g.sector_bytes);
  if (fs::file_size(img) != expect)
    throw_input(img.string(), "size " + std::to_string(fs::file_size(img)) + " bytes, expected " +
                                  std::to_string(expect) + " for the geometry in damage-map.json");
  for (auto& a : f.final_) {
    a.data.resize(static_cast<size_t>(g.sector_bytes));
    in.read(reinterpret_cast<char*>(a.data.data()), g.sector_bytes);
  }
  if (!in) throw_input(img.string(), "read error");
  return f;
}

bool DecodeFolder::record(SectorAttempt attempt) {
  const std::string line = to_json(attempt).dump();
  return record(std::move(attempt), line);
}

bool DecodeFolder::record(SectorAttempt attempt, const std::string& log_line) {
  if (attempt.lba >= final_.size())
    throw_internal("sector attempt for lba " + std::to_string(attempt.lba) + " outside the image");
  spool_line(log_line);
  SectorAttempt& cur = final_[attempt.lba];
  if (cur.status == SectorStatus::conflict) return false;  // only a merge resolves a conflict
  if (!better_than(attempt, cur)) return false;
  if (attempt.data.size() != static_cast<size_t>(geometry_.sector_bytes)) {
    if (attempt.status != SectorStatus::missing)
      throw_internal("sector attempt for lba " + std::to_string(attempt.lba) + " carries no data");
  }
  cur = std::move(attempt);
  return true;
}

void DecodeFolder::append_log_line(const nlohmann::json& line) { spool_line(line.dump()); }

void DecodeFolder::spool_line(const std::string& line) {
  if (!spool_) {
    spool_.reset(std::tmpfile());
    if (!spool_) throw_output("sectors.jsonl", "cannot create a temporary file for the log");
  }
  if (std::fwrite(line.data(), 1, line.size(), spool_.get()) != line.size() || std::fputc('\n', spool_.get()) == EOF)
    throw_output("sectors.jsonl", "cannot write the log's temporary file (disk full?)");
  ++new_lines_;
}

std::vector<std::string> DecodeFolder::logged_lines() const {
  std::vector<std::string> lines;
  if (!log_on_disk_) return lines;
  std::ifstream in(dir_ / "sectors.jsonl");
  if (!in) throw_input((dir_ / "sectors.jsonl").string(), "missing or unreadable");
  std::string line;
  while (std::getline(in, line))
    if (!line.empty()) lines.push_back(line);
  return lines;
}

void DecodeFolder::set_final(SectorAttempt attempt) {
  if (attempt.lba >= final_.size())
    throw_internal("sector result for lba " + std::to_string(attempt.lba) + " outside the image");
  if (attempt.status != SectorStatus::missing && attempt.data.size() != static_cast<size_t>(geometry_.sector_bytes))
    throw_internal("sector result for lba " + std::to_string(attempt.lba) + " carries no data");
  final_[attempt.lba] = std::move(attempt);
}

std::string DecodeFolder::write(const FillPolicy& fill) {
  std::error_code ec;
  fs::create_directories(dir_, ec);
  if (ec) throw_output(dir_.string(), "cannot create the output folder: " + ec.message());

  // image.bin
  const fs::path image_path = dir_ / "image.bin";
  {
    AtomicFile img(image_path);
    for (const auto& a : final_) {
      std::vector<uint8_t> bytes;
      if (a.status == SectorStatus::missing) {
        bytes = fill_pattern(a.lba, geometry_.sector_bytes, fill, "missing");
      } else if (!is_verified(a.status) && a.status != SectorStatus::conflict && fill.fill_unverified) {
        bytes = fill_pattern(a.lba, geometry_.sector_bytes, fill, "unverified");
      } else if (a.data.size() == static_cast<size_t>(geometry_.sector_bytes)) {
        bytes = a.data;
      } else {
        bytes = fill_pattern(a.lba, geometry_.sector_bytes, fill, "missing");
      }
      img.write(std::as_bytes(std::span<const uint8_t>(bytes)));
    }
    img.commit();
  }

  // sectors.jsonl: the old lines, then this run's attempts.
  {
    AtomicFile log(dir_ / "sectors.jsonl");
    std::vector<char> buf(1 << 16);
    if (log_on_disk_) {  // the lines already there, copied as they are
      std::ifstream old(dir_ / "sectors.jsonl", std::ios::binary);
      if (!old) throw_input((dir_ / "sectors.jsonl").string(), "missing or unreadable");
      bool ends_with_newline = true;
      while (old.read(buf.data(), static_cast<std::streamsize>(buf.size())) || old.gcount() > 0) {
        const auto n = static_cast<size_t>(old.gcount());
        log.write(std::string_view(buf.data(), n));
        ends_with_newline = buf[n - 1] == '\n';
      }
      if (!ends_with_newline) log.write("\n");
    }
    if (spool_) {
      std::FILE* f = spool_.get();
      if (std::fflush(f) != 0 || std::fseek(f, 0, SEEK_SET) != 0)
        throw_output("sectors.jsonl", "cannot read back the log's temporary file");
      while (size_t n = std::fread(buf.data(), 1, buf.size(), f)) log.write(std::string_view(buf.data(), n));
      if (std::ferror(f)) throw_output("sectors.jsonl", "cannot read back the log's temporary file");
    }
    log.commit();
  }

  nlohmann::json map = damage_map_json(geometry_, final_);
  write_file_atomic(dir_ / "damage-map.json", map.dump(1) + "\n");
  write_file_atomic(dir_ / "damage-map.svg",
                    damage_map_svg(geometry_, final_, "salvor damage map: " + dir_.filename().string()));

  nlohmann::json outputs = nlohmann::json::object();
  std::string image_sha;
  for (const char* name : {"image.bin", "sectors.jsonl", "damage-map.json", "damage-map.svg"}) {
    std::string h = sha256_file_hex(dir_ / name);
    if (std::string(name) == "image.bin") image_sha = h;
    outputs[name] = {{"sha256", h}, {"bytes", fs::file_size(dir_ / name)}};
  }
  run_["outputs"] = outputs;
  write_file_atomic(dir_ / "run.json", run_.dump(2) + "\n");

  // The log lines are now on disk: a second write() must not append them again.
  spool_.reset();
  new_lines_ = 0;
  log_on_disk_ = true;
  return image_sha;
}

}  // namespace salvor::results
