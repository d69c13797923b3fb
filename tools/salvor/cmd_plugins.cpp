// salvor plugins: the detectors that can be loaded, with their parameters, and every file
// on the search path that was refused and why.
//
// Search path: the directories in SALVOR_PLUGIN_PATH (colon-separated, absolute only),
// then this build's plugin folder, then the install folder. --json prints one object:
//   {"detectors": [{name, version, description, target, soft_output, max_latency,
//                   can_train, path, parameters: [{key, type, default, min, max,
//                   choices, units, help}]}],
//    "refused":   [{path, name, reason}],
//    "search_path": [{path, exists}]}
// Refused files do not change the exit status (0): they are reported, not fatal.

#include <cstdlib>
#include <iostream>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "cli_common.hpp"
#include "common/error.hpp"
#include "detect/plugin_host.hpp"

namespace salvor::cli {

namespace {

using salvor::detect::DetectorInfo;
using salvor::detect::ParamInfo;

nlohmann::json param_json(const ParamInfo& p) {
  nlohmann::json j;
  j["key"] = p.key;
  j["type"] = salvor::detect::param_type_name(p.type);
  switch (p.type) {
    case SALVOR_PARAM_INT:
      j["default"] = static_cast<long long>(p.default_value);
      j["min"] = static_cast<long long>(p.min_value);
      j["max"] = static_cast<long long>(p.max_value);
      break;
    case SALVOR_PARAM_BOOL:
      j["default"] = p.default_value != 0.0;
      break;
    case SALVOR_PARAM_CHOICE:
      j["default"] = salvor::detect::param_value_text(p, p.default_value);
      j["choices"] = p.choices;
      break;
    default:
      j["default"] = p.default_value;
      j["min"] = p.min_value;
      j["max"] = p.max_value;
      break;
  }
  j["units"] = p.units;
  j["help"] = p.help;
  return j;
}

std::string range_text(const ParamInfo& p) {
  using salvor::detect::param_value_text;
  switch (p.type) {
    case SALVOR_PARAM_BOOL: return "true|false";
    case SALVOR_PARAM_CHOICE: {
      std::string s;
      for (const auto& c : p.choices) s += (s.empty() ? "" : "|") + c;
      return s;
    }
    default: return param_value_text(p, p.min_value) + ".." + param_value_text(p, p.max_value);
  }
}

void print_text(const salvor::detect::PluginHost& host) {
  const auto detectors = host.detectors();
  size_t refused = 0;
  for (const auto& r : host.records()) refused += r.loaded ? 0 : 1;
  std::cout << detectors.size() << " detector" << (detectors.size() == 1 ? "" : "s") << " loadable";
  if (refused) std::cout << ", " << refused << " refused";
  std::cout << "\n";
  for (const DetectorInfo* d : detectors) {
    std::cout << "\n" << d->name << " " << d->version << "  (target " << d->target << ", "
              << (d->soft_output ? "soft output" : "hard output with reliabilities") << ", latency "
              << d->max_latency << " bits" << (d->can_train ? ", trainable" : "") << ")\n";
    std::cout << "  " << d->description << "\n";
    std::cout << "  file: " << d->path.string() << "\n";
    if (d->params.empty()) {
      std::cout << "  no parameters\n";
      continue;
    }
    for (const ParamInfo& p : d->params) {
      std::cout << "  " << p.key << " = " << salvor::detect::param_value_text(p, p.default_value) << "  ["
                << salvor::detect::param_type_name(p.type) << " " << range_text(p)
                << (p.units.empty() ? "" : " " + p.units) << "]\n"
                << "      " << p.help << "\n";
    }
  }
  if (refused) {
    std::cout << "\nrefused:\n";
    for (const auto& r : host.records()) {
      if (!r.loaded) std::cout << "  " << r.path.string() << ": " << r.reason << "\n";
    }
  }
  std::cout << "\nsearch path (SALVOR_PLUGIN_PATH, build folder, install folder):\n";
  for (const auto& d : host.search_directories()) {
    std::cout << "  " << d.path.string() << (d.exists ? "" : "  (absent)") << "\n";
  }
}

void print_json(const salvor::detect::PluginHost& host) {
  nlohmann::json out;
  out["detectors"] = nlohmann::json::array();
  for (const DetectorInfo* d : host.detectors()) {
    nlohmann::json j;
    j["name"] = d->name;
    j["version"] = d->version;
    j["description"] = d->description;
    j["target"] = d->target;
    j["soft_output"] = d->soft_output;
    j["max_latency"] = d->max_latency;
    j["can_train"] = d->can_train;
    j["path"] = d->path.string();
    j["parameters"] = nlohmann::json::array();
    for (const ParamInfo& p : d->params) j["parameters"].push_back(param_json(p));
    out["detectors"].push_back(std::move(j));
  }
  out["refused"] = nlohmann::json::array();
  for (const auto& r : host.records()) {
    if (!r.loaded) out["refused"].push_back({{"path", r.path.string()}, {"name", r.name}, {"reason", r.reason}});
  }
  out["search_path"] = nlohmann::json::array();
  for (const auto& d : host.search_directories()) {
    out["search_path"].push_back({{"path", d.path.string()}, {"exists", d.exists}});
  }
  std::cout << out.dump(2) << "\n";
}

}  // namespace

int run_plugins(const std::vector<std::string>& args) {
  return guarded("plugins", [&]() -> int {
    po::options_description visible("options");
    visible.add_options()("json", "print one JSON object (detectors, refused files, search path)");
    po::positional_options_description positional;
    po::variables_map vm;
    if (!parse_command_line("plugins", "[--json]", args, visible, positional, vm)) return exit_ok;
    const auto path = salvor::detect::plugin_search_path(std::getenv("SALVOR_PLUGIN_PATH"), SALVOR_PLUGIN_BUILD_DIR,
                                                         SALVOR_PLUGIN_INSTALL_DIR);
    const salvor::detect::PluginHost host(path);
    if (vm.count("json")) {
      print_json(host);
    } else {
      print_text(host);
    }
    return exit_ok;
  });
}

}  // namespace salvor::cli
