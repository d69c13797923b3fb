#include "detect/detector.hpp"

#include <bit>
#include <cerrno>
#include <cfloat>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <set>

#include "common/error.hpp"
#include "detect/loaded_plugin.hpp"
#include "equalize/targets.hpp"

namespace salvor::detect {

namespace {

constexpr size_t kErrLen = 512;

std::string num(double v) {
  char buf[48];
  std::snprintf(buf, sizeof buf, "%.6g", v);
  return buf;
}

const char* status_name(int status) {
  switch (status) {
    case SALVOR_E_PARAM: return "invalid parameter";
    case SALVOR_E_NOMEM: return "out of memory";
    case SALVOR_E_INPUT: return "invalid input block";
    case SALVOR_E_STATE: return "called in the wrong order";
    case SALVOR_E_INTERNAL: return "internal error";
    default: return "unknown status";
  }
}

bool parse_real(const std::string& text, double& out) {
  if (text.empty()) return false;
  errno = 0;
  char* end = nullptr;
  out = std::strtod(text.c_str(), &end);
  return errno == 0 && end && *end == '\0' && std::isfinite(out);
}

double parse_value(const std::string& detector, const ParamInfo& p, const std::string& text) {
  auto bad = [&](const std::string& what) -> double {
    throw_usage("detector " + detector, "parameter '" + p.key + "': " + what);
  };
  double v = 0.0;
  switch (p.type) {
    case SALVOR_PARAM_BOOL:
      if (text == "true" || text == "1" || text == "yes" || text == "on") return 1.0;
      if (text == "false" || text == "0" || text == "no" || text == "off") return 0.0;
      return bad("'" + text + "' is not a bool (true/false, 1/0, yes/no, on/off)");
    case SALVOR_PARAM_CHOICE:
      for (size_t i = 0; i < p.choices.size(); ++i)
        if (text == p.choices[i]) return static_cast<double>(i);
      {
        std::string all;
        for (const auto& c : p.choices) all += (all.empty() ? "" : ", ") + c;
        return bad("'" + text + "' is not one of " + all);
      }
    case SALVOR_PARAM_INT:
      if (!parse_real(text, v) || std::floor(v) != v) return bad("'" + text + "' is not a whole number");
      break;
    default:
      if (!parse_real(text, v)) return bad("'" + text + "' is not a finite number");
      break;
  }
  if (v < p.min_value || v > p.max_value) {
    return bad("value " + text + " is outside [" + num(p.min_value) + ", " + num(p.max_value) + "]" +
               (p.units.empty() ? "" : " " + p.units));
  }
  return v;
}

}  // namespace

std::vector<std::pair<std::string, double>> resolve_parameters(const DetectorInfo& info, const ParamSettings& settings) {
  std::vector<std::pair<std::string, double>> values;
  for (const auto& p : info.params) values.emplace_back(p.key, p.default_value);
  std::set<std::string> given;
  for (const auto& [key, text] : settings) {
    size_t index = info.params.size();
    for (size_t i = 0; i < info.params.size(); ++i)
      if (info.params[i].key == key) index = i;
    if (index == info.params.size()) {
      std::string known;
      for (const auto& p : info.params) known += (known.empty() ? "" : ", ") + p.key;
      throw_usage("detector " + info.name, "unknown parameter '" + key + "' (parameters: " +
                                               (known.empty() ? std::string("none") : known) + ")");
    }
    if (!given.insert(key).second) throw_usage("detector " + info.name, "parameter '" + key + "' is given twice");
    values[index].second = parse_value(info.name, info.params[index], text);
  }
  return values;
}

Detector::Detector(std::shared_ptr<const LoadedPlugin> plugin, const DetectorSetup& setup) : plugin_(std::move(plugin)) {
  const DetectorInfo& in = plugin_->info;
  values_ = resolve_parameters(in, setup.params);
  const bool wants_none = equalize::lookup_target(in.target).kind == equalize::TargetKind::none;
  if (!wants_none) {
    if (setup.target.empty() || setup.target.size() > SALVOR_MAX_TARGET_TAPS) {
      throw_usage("detector " + in.name, "wants target " + in.target + ": got " + std::to_string(setup.target.size()) +
                                             " target taps, expected 1.." + std::to_string(SALVOR_MAX_TARGET_TAPS));
    }
    for (double f : setup.target)
      if (!std::isfinite(f)) throw_usage("detector " + in.name, "target tap is not finite");
  }
  std::vector<salvor_param_value> pv;
  for (const auto& [key, value] : values_) pv.push_back({key.c_str(), value});
  salvor_detector_config cfg{};
  cfg.struct_size = sizeof(salvor_detector_config);
  cfg.target = wants_none ? nullptr : setup.target.data();
  cfg.target_len = wants_none ? 0 : setup.target.size();
  cfg.noise_sigma = setup.noise_sigma;
  cfg.params = pv.data();
  cfg.param_count = pv.size();
  char err[kErrLen] = {0};
  void* handle = nullptr;
  const int st = plugin_->api->create(&cfg, &handle, err, sizeof err);
  err[kErrLen - 1] = '\0';
  if (st != SALVOR_OK) {
    if (handle) plugin_->api->destroy(handle);
    fail("create", st, err);
  }
  if (!handle) throw_internal("detector " + in.name + ": create returned no instance");
  handle_ = handle;
}

Detector::~Detector() {
  if (handle_) plugin_->api->destroy(handle_);
}

Detector::Detector(Detector&& other) noexcept
    : plugin_(std::move(other.plugin_)), handle_(other.handle_), values_(std::move(other.values_)) {
  other.handle_ = nullptr;
}

Detector& Detector::operator=(Detector&& other) noexcept {
  if (this != &other) {
    if (handle_) plugin_->api->destroy(handle_);
    plugin_ = std::move(other.plugin_);
    handle_ = other.handle_;
    values_ = std::move(other.values_);
    other.handle_ = nullptr;
  }
  return *this;
}

const DetectorInfo& Detector::info() const { return plugin_->info; }
bool Detector::can_train() const { return plugin_->api->train != nullptr; }
size_t Detector::max_latency() const { return plugin_->info.max_latency; }

void Detector::fail(const char* call, int status, const char* message) const {
  const std::string what = std::string(call) + " failed (" + status_name(status) + ", status " +
                           std::to_string(status) + ")" + (message && *message ? std::string(": ") + message : "");
  // A bad parameter is the user's; bad samples are the input's; anything else is a bug.
  const ErrorKind kind = status == SALVOR_E_PARAM   ? ErrorKind::usage
                         : status == SALVOR_E_INPUT ? ErrorKind::input
                                                    : ErrorKind::internal;
  throw Error(kind, "detector " + plugin_->info.name, what);
}

void Detector::check_output(const char* call, size_t produced, size_t capacity, std::span<const uint8_t> bits,
                            std::span<const float> llr) const {
  if (produced > capacity) {
    throw_internal("detector " + plugin_->info.name + ": " + call + " reported " + std::to_string(produced) +
                   " bits, more than the room for " + std::to_string(capacity));
  }
  // A branch-free pass first (vectorised): is any bit above 1, any LLR not finite, or any
  // sign against its bit? Only then look for the first offender, to name it.
  // On the float's bit patterns, in integers, so that it vectorises: exponent all ones is
  // not finite; a set sign bit with a nonzero magnitude is < 0, a clear one is > 0.
  uint32_t bad = 0;
  for (size_t i = 0; i < produced; ++i) {
    const uint32_t b = bits[i];
    const uint32_t u = std::bit_cast<uint32_t>(llr[i]);
    const uint32_t magnitude = u & 0x7fffffffu, negative = u >> 31;
    const uint32_t nonzero = uint32_t(magnitude != 0);
    bad |= uint32_t(b > 1) | uint32_t((u & 0x7f800000u) == 0x7f800000u) |
           (uint32_t(b == 1) & negative & nonzero) | (uint32_t(b == 0) & (negative ^ 1u) & nonzero);
  }
  if (!bad) return;
  for (size_t i = 0; i < produced; ++i) {
    const uint8_t b = bits[i];
    const float l = llr[i];
    if (b > 1) {
      throw_internal("detector " + plugin_->info.name + ": " + call + " wrote bit value " + std::to_string(b) +
                     " at " + std::to_string(i));
    }
    if (!std::isfinite(l) || (b == 1 && l < 0.0f) || (b == 0 && l > 0.0f)) {
      throw_internal("detector " + plugin_->info.name + ": " + call + " wrote llr " + num(l) + " for bit " +
                     std::to_string(b) + " at " + std::to_string(i) + " (the sign must agree with the bit)");
    }
  }
}

void Detector::train(std::span<const float> samples, std::span<const uint8_t> known_bits, int level_before) {
  const std::string who = "detector " + plugin_->info.name;
  if (!can_train()) throw_usage(who, "cannot be trained (the plugin has no train function)");
  if (known_bits.size() != samples.size()) {
    throw_usage(who, "train: " + std::to_string(known_bits.size()) + " known bits for " +
                         std::to_string(samples.size()) + " samples");
  }
  if (level_before != 1 && level_before != -1) throw_usage(who, "train: level before must be +1 or -1");
  for (size_t i = 0; i < known_bits.size(); ++i) {
    if (known_bits[i] > 1) {
      throw_usage(who, "train: known bit " + std::to_string(i) + " has value " + std::to_string(known_bits[i]) +
                           ", expected 0 or 1");
    }
  }
  char err[kErrLen] = {0};
  const int st = plugin_->api->train(handle_, samples.data(), known_bits.data(), samples.size(), level_before, err,
                                     sizeof err);
  err[kErrLen - 1] = '\0';
  if (st != SALVOR_OK) fail("train", st, err);
}

size_t Detector::process(std::span<const float> samples, std::span<const uint8_t> erasure, std::span<uint8_t> bits,
                         std::span<float> llr) {
  if (!erasure.empty() && erasure.size() != samples.size()) {
    throw_usage("detector " + plugin_->info.name, "process: " + std::to_string(erasure.size()) +
                                                      " erasure flags for " + std::to_string(samples.size()) + " samples");
  }
  const size_t need = capacity_for(samples.size());
  const size_t capacity = std::min(bits.size(), llr.size());
  if (capacity < need) {
    throw_usage("detector " + plugin_->info.name, "process: output room " + std::to_string(capacity) +
                                                      " is below the " + std::to_string(need) +
                                                      " needed (samples + max latency)");
  }
  salvor_detector_input in{samples.data(), erasure.empty() ? nullptr : erasure.data(), samples.size()};
  salvor_detector_output out{bits.data(), llr.data(), capacity, 0};
  char err[kErrLen] = {0};
  const int st = plugin_->api->process(handle_, &in, &out, err, sizeof err);
  err[kErrLen - 1] = '\0';
  if (st != SALVOR_OK) fail("process", st, err);
  check_output("process", out.produced, capacity, bits, llr);
  return out.produced;
}

size_t Detector::flush(std::span<uint8_t> bits, std::span<float> llr) {
  const size_t capacity = std::min(bits.size(), llr.size());
  if (capacity < max_latency()) {
    throw_usage("detector " + plugin_->info.name, "flush: output room " + std::to_string(capacity) +
                                                      " is below the max latency " + std::to_string(max_latency()));
  }
  salvor_detector_output out{bits.data(), llr.data(), capacity, 0};
  char err[kErrLen] = {0};
  const int st = plugin_->api->flush(handle_, &out, err, sizeof err);
  err[kErrLen - 1] = '\0';
  if (st != SALVOR_OK) fail("flush", st, err);
  check_output("flush", out.produced, capacity, bits, llr);
  return out.produced;
}

void Detector::reset() { plugin_->api->reset(handle_); }

std::string Detector::describe() const {
  const DetectorInfo& in = plugin_->info;
  std::string s = in.name + " " + in.version + " target=" + in.target;
  for (size_t i = 0; i < values_.size(); ++i) s += " " + values_[i].first + "=" + param_value_text(in.params[i], values_[i].second);
  return s;
}

}  // namespace salvor::detect
