#include "equalize/targets.hpp"

#include <cctype>
#include <cmath>
#include <cstdio>

#include "common/error.hpp"

namespace salvor::equalize {

namespace {

struct FixedTarget {
  const char* name;
  std::vector<double> taps;
};

// The registry: plain data, built on each call (no static mutable state).
std::vector<FixedTarget> fixed_targets() {
  return {
      {"dicode", {1.0, -1.0}},
      {"PR4", {1.0, 0.0, -1.0}},
      {"EPR4", {1.0, 1.0, -1.0, -1.0}},
      {"E2PR4", {1.0, 2.0, 0.0, -2.0, -1.0}},
  };
}

std::string lower(std::string_view s) {
  std::string out(s);
  for (char& c : out) c = static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
  return out;
}

std::string names_list() {
  std::string all;
  for (const auto& n : known_target_names()) all += (all.empty() ? "" : ", ") + n;
  return all;
}

void check_gpr_length(std::string_view name, size_t length) {
  if (length < kMinGprLength || length > kMaxGprLength) {
    throw_usage("target " + std::string(name),
                "generalized target length " + std::to_string(length) + " is outside " +
                    std::to_string(kMinGprLength) + ".." + std::to_string(kMaxGprLength));
  }
}

}  // namespace

TargetSpec lookup_target(std::string_view name, size_t gpr_length) {
  const std::string key = lower(name);
  if (key == "none") return TargetSpec{TargetKind::none, "none", {}, 0};
  for (const auto& t : fixed_targets()) {
    if (key == lower(t.name)) return TargetSpec{TargetKind::fixed, t.name, t.taps, t.taps.size()};
  }
  if (key == "gpr") {
    check_gpr_length(name, gpr_length);
    return TargetSpec{TargetKind::generalized, "GPR" + std::to_string(gpr_length), {}, gpr_length};
  }
  if (key.size() == 4 && key.rfind("gpr", 0) == 0 && std::isdigit(static_cast<unsigned char>(key[3]))) {
    const size_t length = static_cast<size_t>(key[3] - '0');
    check_gpr_length(name, length);
    return TargetSpec{TargetKind::generalized, "GPR" + std::to_string(length), {}, length};
  }
  throw_usage("target", "unknown target '" + std::string(name) + "' (known: " + names_list() + ")");
}

bool is_known_target(std::string_view name) {
  try {
    lookup_target(name);
    return true;
  } catch (const Error&) {
    return false;
  }
}

std::vector<std::string> known_target_names() {
  std::vector<std::string> names{"none"};
  for (const auto& t : fixed_targets()) names.emplace_back(t.name);
  names.emplace_back("GPR");
  for (size_t n = kMinGprLength; n <= kMaxGprLength; ++n) names.push_back("GPR" + std::to_string(n));
  return names;
}

std::string polynomial_text(const std::vector<double>& taps) {
  std::string out;
  for (size_t i = 0; i < taps.size(); ++i) {
    const double c = taps[i];
    if (c == 0.0) continue;
    const double mag = std::fabs(c);
    if (out.empty()) {
      if (c < 0) out += "-";
    } else {
      out += c < 0 ? " - " : " + ";
    }
    char coef[32];
    std::snprintf(coef, sizeof coef, "%.4g", mag);
    const bool unit = std::fabs(mag - 1.0) < 1e-12;
    if (i == 0) {
      out += coef;
    } else {
      if (!unit) out += coef;
      out += "D";
      if (i > 1) {
        out += '^';
        out += std::to_string(i);
      }
    }
  }
  return out.empty() ? "0" : out;
}

}  // namespace salvor::equalize
