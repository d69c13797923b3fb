#include "results/sector_result.hpp"

#include "common/error.hpp"

namespace salvor::results {

const char* to_string(SectorStatus s) {
  switch (s) {
    case SectorStatus::good: return "good";
    case SectorStatus::corrected: return "corrected";
    case SectorStatus::failed: return "failed";
    case SectorStatus::missing: return "missing";
    case SectorStatus::conflict: return "conflict";
  }
  return "missing";
}

SectorStatus status_from_string(const std::string& s) {
  if (s == "good") return SectorStatus::good;
  if (s == "corrected") return SectorStatus::corrected;
  if (s == "failed") return SectorStatus::failed;
  if (s == "missing") return SectorStatus::missing;
  if (s == "conflict") return SectorStatus::conflict;
  throw_input("status", "unknown sector status '" + s + "'");
}

nlohmann::json to_json(const SectorAttempt& a) {
  nlohmann::json j;
  j["lba"] = a.lba;
  j["cylinder"] = a.cylinder;
  j["head"] = a.head;
  j["sector"] = a.sector;
  j["revolutions"] = a.revolutions;
  j["attempt"] = a.attempt;
  j["status"] = to_string(a.status);
  j["confidence"] = a.confidence;
  j["detector"] = a.detector;
  j["detector_params"] = a.detector_params;
  j["header_ok"] = a.header_ok;
  j["placed_by_position"] = a.placed_by_position;
  j["rs_corrected"] = a.rs_corrected;
  j["rs_erasures"] = a.rs_erasures;
  j["rs_capacity"] = a.rs_capacity;
  j["crc"] = a.crc;
  j["reliability_min"] = a.reliability_min;
  j["reliability_mean"] = a.reliability_mean;
  j["low_reliability_fraction"] = a.low_reliability_fraction;
  j["snr_db"] = a.snr_db;
  j["eq_mse"] = a.eq_mse;
  j["capture"] = a.capture;
  j["capture_position"] = a.capture_position;
  j["notes"] = a.notes;
  return j;
}

SectorAttempt attempt_from_json(const nlohmann::json& j) {
  SectorAttempt a;
  try {
    a.lba = j.at("lba").get<uint64_t>();
    a.cylinder = j.at("cylinder").get<int>();
    a.head = j.at("head").get<int>();
    a.sector = j.at("sector").get<int>();
    a.revolutions = j.value("revolutions", std::vector<int>{});
    a.attempt = j.value("attempt", std::string("decode"));
    a.status = status_from_string(j.at("status").get<std::string>());
    a.confidence = j.value("confidence", 0.0);
    a.detector = j.value("detector", std::string());
    a.detector_params = j.value("detector_params", nlohmann::json::object());
    a.header_ok = j.value("header_ok", false);
    a.placed_by_position = j.value("placed_by_position", false);
    a.rs_corrected = j.value("rs_corrected", std::vector<int>{});
    a.rs_erasures = j.value("rs_erasures", std::vector<int>{});
    a.rs_capacity = j.value("rs_capacity", 0);
    a.crc = j.value("crc", std::string("not_checked"));
    a.reliability_min = j.value("reliability_min", 0.0f);
    a.reliability_mean = j.value("reliability_mean", 0.0f);
    a.low_reliability_fraction = j.value("low_reliability_fraction", 0.0);
    a.snr_db = j.value("snr_db", 0.0);
    a.eq_mse = j.value("eq_mse", 0.0);
    a.capture = j.value("capture", std::string());
    a.capture_position = j.value("capture_position", -1.0);
    a.notes = j.value("notes", std::vector<std::string>{});
  } catch (const nlohmann::json::exception& e) {
    throw_input("sector record", std::string("malformed: ") + e.what());
  }
  return a;
}

bool better_than(const SectorAttempt& a, const SectorAttempt& b) {
  bool va = is_verified(a.status), vb = is_verified(b.status);
  if (va != vb) return va;
  if (a.confidence != b.confidence) return a.confidence > b.confidence;
  // Same confidence: prefer found over missing, then fewer corrections.
  return static_cast<int>(a.status) < static_cast<int>(b.status);
}

}  // namespace salvor::results
