// salvor's capture sidecar ("<capture file name>.json", schema in DEVELOPERS.md "Files"):
// parsed with nlohmann::json, every known field type-checked, unknown fields kept.

#include <cmath>
#include <limits>

#include "common/error.hpp"
#include "load/load_detail.hpp"

namespace salvor::load::detail {

namespace {

constexpr size_t kMaxMetadataBytes = 64u << 20;  // far above any real sidecar

std::string shown(const nlohmann::json& v) {
  std::string s = v.dump();
  if (s.size() > 60) s = s.substr(0, 57) + "...";
  return s;
}

}  // namespace

std::optional<double> json_number(const nlohmann::json& obj, const std::string& key,
                                  const std::string& where) {
  auto it = obj.find(key);
  if (it == obj.end() || it->is_null()) return std::nullopt;
  if (!it->is_number()) throw_input(where, "field " + key + " must be a number, found " + shown(*it));
  return it->get<double>();
}

std::optional<double> json_positive_number(const nlohmann::json& obj, const std::string& key,
                                           const std::string& where) {
  auto v = json_number(obj, key, where);
  if (v && !(std::isfinite(*v) && *v > 0))
    throw_input(where, "field " + key + " must be a positive number, found " + shown(obj[key]));
  return v;
}

std::optional<int64_t> json_non_negative_integer(const nlohmann::json& obj, const std::string& key,
                                                 const std::string& where) {
  auto it = obj.find(key);
  if (it == obj.end() || it->is_null()) return std::nullopt;
  bool ok = it->is_number_unsigned() || (it->is_number_integer() && it->get<int64_t>() >= 0);
  if (!ok) throw_input(where, "field " + key + " must be a non-negative integer, found " + shown(*it));
  if (it->is_number_unsigned() &&
      it->get<uint64_t>() > static_cast<uint64_t>(std::numeric_limits<int64_t>::max()))
    throw_input(where, "field " + key + " is too large: " + shown(*it));
  return it->get<int64_t>();
}

std::optional<std::string> json_string(const nlohmann::json& obj, const std::string& key,
                                       const std::string& where) {
  auto it = obj.find(key);
  if (it == obj.end() || it->is_null()) return std::nullopt;
  if (!it->is_string()) throw_input(where, "field " + key + " must be a string, found " + shown(*it));
  return it->get<std::string>();
}

namespace {

std::optional<int> small_integer(const nlohmann::json& obj, const std::string& key,
                                 const std::string& where) {
  auto v = json_non_negative_integer(obj, key, where);
  if (!v) return std::nullopt;
  if (*v > std::numeric_limits<int>::max()) throw_input(where, "field " + key + " is too large: " + std::to_string(*v));
  return static_cast<int>(*v);
}

}  // namespace

SidecarFields read_sidecar(const std::filesystem::path& sidecar_path) {
  InputFile file(sidecar_path);
  const std::string where = file.name();
  SidecarFields f;
  f.path = sidecar_path;
  try {
    f.json = nlohmann::json::parse(read_small_file(file, kMaxMetadataBytes));
  } catch (const nlohmann::json::parse_error& e) {
    throw_input(where, std::string("sidecar is not valid JSON: ") + e.what());
  }
  const auto& j = f.json;
  if (!j.is_object()) throw_input(where, "sidecar must be a JSON object, found " + shown(j));
  auto version = json_non_negative_integer(j, "salvor_sidecar", where);
  if (!version) throw_input(where, "not a salvor sidecar: the field salvor_sidecar is missing");
  if (*version != 1)
    throw_input(where, "sidecar version " + std::to_string(*version) + " is not supported (this build reads 1)");

  f.sample_rate_hz = json_number(j, "sample_rate_hz", where);  // range-checked where it is used
  f.bit_rate_hz = json_positive_number(j, "bit_rate_hz", where);
  f.full_scale = json_positive_number(j, "full_scale", where);
  f.format = json_string(j, "format", where);
  f.cylinder = small_integer(j, "cylinder", where);
  f.head = small_integer(j, "head", where);
  f.revolution = small_integer(j, "revolution", where);
  f.channel = small_integer(j, "channel", where);
  if (auto enc = json_string(j, "sample_encoding", where)) {
    f.sample_encoding = parse_encoding(*enc);
    if (!f.sample_encoding)
      throw_input(where, "field sample_encoding \"" + *enc +
                             "\" is not one of int8, uint8, int16_le, int16_be, int32_le, int32_be, "
                             "float32_le, float64_le");
  }
  for (const char* key : {"rig", "synth"}) {
    auto it = j.find(key);
    if (it != j.end() && !it->is_object())
      throw_input(where, std::string("field ") + key + " must be a JSON object, found " + shown(*it));
  }
  return f;
}

}  // namespace salvor::load::detail
