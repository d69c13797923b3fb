#include "detect/plugin_host.hpp"

#include <dlfcn.h>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <set>
#include <system_error>

#include "common/error.hpp"
#include "detect/detector.hpp"
#include "detect/loaded_plugin.hpp"
#include "equalize/targets.hpp"

namespace fs = std::filesystem;

namespace salvor::detect {

namespace {

constexpr size_t kMaxParams = 64;
constexpr size_t kMaxNameLength = 64;

std::string num(double v) {
  char buf[48];
  std::snprintf(buf, sizeof buf, "%.6g", v);
  return buf;
}

bool is_identifier(const char* s, bool allow_dash) {
  if (!s || !*s) return false;
  size_t n = 0;
  for (const char* p = s; *p; ++p, ++n) {
    const char c = *p;
    const bool ok = (c >= 'a' && c <= 'z') || (c >= '0' && c <= '9') || c == '_' || (allow_dash && c == '-');
    if (!ok) return false;
  }
  return n <= kMaxNameLength;
}

std::vector<std::string> split_choices(const char* choices) {
  std::vector<std::string> out;
  std::string cur;
  for (const char* p = choices; *p; ++p) {
    if (*p == '|') {
      out.push_back(cur);
      cur.clear();
    } else {
      cur += *p;
    }
  }
  out.push_back(cur);
  return out;
}

bool is_integral(double v) { return std::isfinite(v) && std::floor(v) == v; }

// Checks one descriptor; returns an empty string or what is wrong with it.
std::string check_param(const salvor_param_desc& d, size_t index, ParamInfo& info) {
  const std::string where = "parameter " + std::to_string(index);
  if (!is_identifier(d.key, false)) return where + ": key is missing or not lowercase [a-z0-9_]";
  const std::string k = std::string("parameter '") + d.key + "'";
  if (!d.help) return k + ": help text is missing";
  info.key = d.key;
  info.type = d.type;
  info.default_value = d.default_value;
  info.min_value = d.min_value;
  info.max_value = d.max_value;
  info.units = d.units ? d.units : "";
  info.help = d.help;
  switch (d.type) {
    case SALVOR_PARAM_BOOL:
      if (d.default_value != 0.0 && d.default_value != 1.0) return k + ": bool default must be 0 or 1";
      info.min_value = 0.0;
      info.max_value = 1.0;
      return "";
    case SALVOR_PARAM_INT:
    case SALVOR_PARAM_REAL:
    case SALVOR_PARAM_CHOICE:
      break;
    default:
      return k + ": unknown type " + std::to_string(d.type);
  }
  if (!std::isfinite(d.min_value) || !std::isfinite(d.max_value) || !std::isfinite(d.default_value)) {
    return k + ": default, min and max must be finite";
  }
  if (d.min_value > d.max_value) return k + ": min " + num(d.min_value) + " is above max " + num(d.max_value);
  if (d.default_value < d.min_value || d.default_value > d.max_value) {
    return k + ": default " + num(d.default_value) + " is outside [" + num(d.min_value) + ", " + num(d.max_value) + "]";
  }
  if (d.type == SALVOR_PARAM_INT && !(is_integral(d.default_value) && is_integral(d.min_value) && is_integral(d.max_value))) {
    return k + ": int default, min and max must be whole numbers";
  }
  if (d.type == SALVOR_PARAM_CHOICE) {
    if (!d.choices || !*d.choices) return k + ": choice parameter without choices";
    info.choices = split_choices(d.choices);
    for (const auto& c : info.choices)
      if (c.empty()) return k + ": empty choice name in '" + d.choices + "'";
    if (d.min_value != 0.0 || d.max_value != static_cast<double>(info.choices.size() - 1) ||
        !is_integral(d.default_value)) {
      return k + ": choice range must be 0.." + std::to_string(info.choices.size() - 1) + " for " +
             std::to_string(info.choices.size()) + " choices";
    }
  }
  return "";
}

// Checks the table; fills `info` and returns "" or why the plugin is refused.
std::string check_table(const salvor_detector_api* api, DetectorInfo& info) {
  if (!api) return "entry point returned no table";
  if (api->abi_version != SALVOR_DETECTOR_ABI_VERSION) {
    return "plugin interface version " + std::to_string(api->abi_version) +
           " is not supported: this host speaks version " + std::to_string(SALVOR_DETECTOR_ABI_VERSION);
  }
  if (api->struct_size < sizeof(salvor_detector_api)) {
    return "table is " + std::to_string(api->struct_size) + " bytes, interface version 1 needs at least " +
           std::to_string(sizeof(salvor_detector_api));
  }
  if (!is_identifier(api->name, true)) return "detector name is missing or not lowercase [a-z0-9_-], at most 64 characters";
  info.name = api->name;
  if (!api->version || !*api->version) return "detector '" + info.name + "' has no version";
  if (!api->description) return "detector '" + info.name + "' has no description";
  if (!api->target) return "detector '" + info.name + "' declares no target";
  if (!equalize::is_known_target(api->target)) {
    std::string known;
    for (const auto& n : equalize::known_target_names()) known += (known.empty() ? "" : ", ") + n;
    return "detector '" + info.name + "' wants unknown target '" + api->target + "' (known: " + known + ")";
  }
  const struct {
    const void* fn;
    const char* name;
  } required[] = {{reinterpret_cast<const void*>(api->create), "create"},
                  {reinterpret_cast<const void*>(api->process), "process"},
                  {reinterpret_cast<const void*>(api->flush), "flush"},
                  {reinterpret_cast<const void*>(api->reset), "reset"},
                  {reinterpret_cast<const void*>(api->destroy), "destroy"}};
  for (const auto& r : required) {
    if (!r.fn) return "detector '" + info.name + "' has no '" + r.name + "' function";
  }
  if (api->param_count > kMaxParams) {
    return "detector '" + info.name + "' declares " + std::to_string(api->param_count) + " parameters, at most " +
           std::to_string(kMaxParams) + " are allowed";
  }
  if (api->param_count > 0 && !api->params) return "detector '" + info.name + "' declares parameters but no table";
  std::set<std::string> keys;
  for (size_t i = 0; i < api->param_count; ++i) {
    ParamInfo p;
    const std::string why = check_param(api->params[i], i, p);
    if (!why.empty()) return "detector '" + info.name + "' " + why;
    if (!keys.insert(p.key).second) return "detector '" + info.name + "' declares parameter '" + p.key + "' twice";
    info.params.push_back(std::move(p));
  }
  info.version = api->version;
  info.description = api->description;
  info.target = api->target;
  info.soft_output = api->soft_output != 0;
  info.max_latency = api->max_latency;
  info.can_train = api->train != nullptr;
  return "";
}

}  // namespace

LoadedPlugin::~LoadedPlugin() {
  if (handle) ::dlclose(handle);
}

const char* param_type_name(int type) {
  switch (type) {
    case SALVOR_PARAM_INT: return "int";
    case SALVOR_PARAM_REAL: return "real";
    case SALVOR_PARAM_BOOL: return "bool";
    case SALVOR_PARAM_CHOICE: return "choice";
    default: return "unknown";
  }
}

std::string param_value_text(const ParamInfo& p, double value) {
  switch (p.type) {
    case SALVOR_PARAM_INT: return std::to_string(static_cast<long long>(value));
    case SALVOR_PARAM_BOOL: return value != 0.0 ? "true" : "false";
    case SALVOR_PARAM_CHOICE: {
      const auto i = static_cast<size_t>(value);
      return i < p.choices.size() ? p.choices[i] : num(value);
    }
    default: return num(value);
  }
}

std::vector<fs::path> plugin_search_path(const char* env_value, const fs::path& build_dir, const fs::path& install_dir) {
  std::vector<fs::path> out;
  if (env_value) {
    std::string cur;
    for (const char* p = env_value;; ++p) {
      if (*p == ':' || *p == '\0') {
        if (!cur.empty()) out.emplace_back(cur);
        cur.clear();
        if (*p == '\0') break;
      } else {
        cur += *p;
      }
    }
  }
  if (!build_dir.empty()) out.push_back(build_dir);
  if (!install_dir.empty()) out.push_back(install_dir);
  return out;
}

PluginHost::PluginHost(const std::vector<fs::path>& search_path) {
  std::set<fs::path> seen_dirs;
  for (const auto& dir : search_path) {
    if (dir.empty()) continue;
    if (!dir.is_absolute()) {
      // Never the current directory, never a relative path: a plugin runs with our rights.
      records_.push_back({dir, false, "", "relative directory in the search path ignored (only absolute paths are searched)"});
      dirs_.push_back({dir, false});
      continue;
    }
    std::error_code ec;
    const bool is_dir = fs::is_directory(dir, ec);
    dirs_.push_back({dir, is_dir});
    if (!is_dir) {
      if (fs::exists(dir, ec)) records_.push_back({dir, false, "", "search path entry is not a directory"});
      continue;
    }
    const fs::path canonical = fs::weakly_canonical(dir, ec);
    if (!seen_dirs.insert(ec ? dir : canonical).second) continue;  // same folder listed twice
    std::vector<fs::path> files;
    for (fs::directory_iterator it(dir, ec), end; !ec && it != end; it.increment(ec)) {
      if (it->path().extension() != ".so") continue;
      std::error_code fec;
      if (fs::is_regular_file(it->path(), fec)) files.push_back(it->path());
    }
    if (ec) {
      records_.push_back({dir, false, "", "cannot list directory: " + ec.message()});
      continue;
    }
    std::sort(files.begin(), files.end());
    for (const auto& f : files) consider_file(f);
  }
}

void PluginHost::consider_file(const fs::path& file) {
  PluginRecord rec{file, false, "", ""};
  std::error_code ec;
  const fs::path canonical = fs::weakly_canonical(file, ec);
  for (const auto& p : plugins_) {
    std::error_code pec;
    if (!ec && fs::weakly_canonical(p->info.path, pec) == canonical) {
      rec.reason = "same file as " + p->info.path.string() + " (already loaded)";
      records_.push_back(std::move(rec));
      return;
    }
  }
  ::dlerror();
  void* handle = ::dlopen(file.c_str(), RTLD_NOW | RTLD_LOCAL);
  if (!handle) {
    const char* why = ::dlerror();
    rec.reason = std::string("not a salvor detector plugin: cannot load it as a shared library (") +
                 (why ? why : "unknown reason") + ")";
    records_.push_back(std::move(rec));
    return;
  }
  auto plugin = std::make_shared<LoadedPlugin>();
  plugin->handle = handle;  // closed by ~LoadedPlugin whatever happens next
  plugin->info.path = file;
  ::dlerror();
  void* sym = ::dlsym(handle, SALVOR_DETECTOR_ENTRY_NAME);
  if (!sym) {
    rec.reason = "not a salvor detector plugin: no entry point " SALVOR_DETECTOR_ENTRY_NAME "()";
    records_.push_back(std::move(rec));
    return;
  }
  salvor_detector_entry_fn entry;
  static_assert(sizeof(entry) == sizeof(sym));
  std::memcpy(&entry, &sym, sizeof entry);  // POSIX: object pointer to function pointer
  plugin->api = entry();
  const std::string why = check_table(plugin->api, plugin->info);
  rec.name = plugin->info.name;
  if (!why.empty()) {
    rec.reason = why;
    records_.push_back(std::move(rec));
    return;
  }
  for (const auto& p : plugins_) {
    if (p->info.name == plugin->info.name) {
      rec.reason = "detector name '" + plugin->info.name + "' is already provided by " + p->info.path.string();
      records_.push_back(std::move(rec));
      return;
    }
  }
  rec.loaded = true;
  records_.push_back(std::move(rec));
  plugins_.push_back(std::move(plugin));
}

PluginHost::~PluginHost() = default;
PluginHost::PluginHost(PluginHost&&) noexcept = default;
PluginHost& PluginHost::operator=(PluginHost&&) noexcept = default;

std::vector<const DetectorInfo*> PluginHost::detectors() const {
  std::vector<const DetectorInfo*> out;
  for (const auto& p : plugins_) out.push_back(&p->info);
  return out;
}

const DetectorInfo* PluginHost::find(std::string_view name) const {
  for (const auto& p : plugins_)
    if (p->info.name == name) return &p->info;
  return nullptr;
}

Detector PluginHost::create(std::string_view name, const DetectorSetup& setup) const {
  for (const auto& p : plugins_) {
    if (p->info.name == name) return Detector(p, setup);
  }
  std::string known;
  for (const auto& p : plugins_) known += (known.empty() ? "" : ", ") + p->info.name;
  throw_usage("detector", "no detector named '" + std::string(name) + "' (loaded: " +
                              (known.empty() ? std::string("none") : known) + "; see salvor plugins)");
}

}  // namespace salvor::detect
