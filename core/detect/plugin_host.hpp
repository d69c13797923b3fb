#pragma once
// The detector plugin host: finds detector plugins (salvor_detector.h) on a search path,
// loads them with dlopen(RTLD_NOW | RTLD_LOCAL), checks the table and keeps a record for
// every file it looked at: loaded, or why not. One refused file never stops the others.
//
// The host never reads the environment: the command builds the search path (see
// plugin_search_path) and hands it over, so tests can point the host anywhere.
// Search order is the order of the directories; the first plugin with a name wins and a
// later one with the same name is refused, naming the first owner's path.

#include <filesystem>
#include <map>
#include <memory>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "detect/salvor_detector.h"

namespace salvor::detect {

class Detector;

// One self-described parameter, copied out of the plugin's table.
struct ParamInfo {
  std::string key;
  int type = SALVOR_PARAM_REAL;  // SALVOR_PARAM_*
  double default_value = 0.0;
  double min_value = 0.0;
  double max_value = 0.0;
  std::vector<std::string> choices;  // CHOICE only
  std::string units;
  std::string help;
};

const char* param_type_name(int type);  // "int", "real", "bool", "choice"
// The value as text: an integer, a real, true/false, or the choice's name.
std::string param_value_text(const ParamInfo& p, double value);

struct DetectorInfo {
  std::string name;
  std::string version;
  std::string description;
  std::string target;  // as declared: "PR4", "EPR4", "E2PR4", "GPR", "none", ...
  bool soft_output = false;
  size_t max_latency = 0;
  bool can_train = false;
  std::vector<ParamInfo> params;
  std::filesystem::path path;  // the file it came from
};

// What happened to one file (or one search-path entry) the host looked at.
struct PluginRecord {
  std::filesystem::path path;
  bool loaded = false;
  std::string name;    // the detector's name when known
  std::string reason;  // why it was refused (empty when loaded)
};

struct SearchDirectory {
  std::filesystem::path path;
  bool exists = false;
};

// The standard search path: the colon-separated directories of `env_value` (the value of
// SALVOR_PLUGIN_PATH, may be null or empty), then `build_dir`, then `install_dir`.
// Empty entries are dropped. Relative entries are kept so the host can refuse them visibly.
std::vector<std::filesystem::path> plugin_search_path(const char* env_value,
                                                      const std::filesystem::path& build_dir,
                                                      const std::filesystem::path& install_dir);

// Values given for a detector's parameters, as text (from a command line or a run file).
using ParamSettings = std::vector<std::pair<std::string, std::string>>;

struct DetectorSetup {
  std::vector<double> target;  // taps the equalizer delivers (empty for "none")
  double noise_sigma = 0.0;    // rms noise at the detector input, <= 0 if unknown
  ParamSettings params;        // key/value text; unknown keys are refused
};

struct LoadedPlugin;  // one dlopen handle + its table (shared by the host and instances)

class PluginHost {
 public:
  // Loads every *.so in the given directories, in order (files in a directory by name).
  explicit PluginHost(const std::vector<std::filesystem::path>& search_path);
  ~PluginHost();
  PluginHost(const PluginHost&) = delete;
  PluginHost& operator=(const PluginHost&) = delete;
  PluginHost(PluginHost&&) noexcept;
  PluginHost& operator=(PluginHost&&) noexcept;

  const std::vector<PluginRecord>& records() const { return records_; }
  const std::vector<SearchDirectory>& search_directories() const { return dirs_; }
  std::vector<const DetectorInfo*> detectors() const;  // loaded ones, in load order
  const DetectorInfo* find(std::string_view name) const;

  // A new instance of detector `name`. Throws Error(usage) for an unknown name, a bad
  // parameter (naming detector and key) or a target that does not fit; Error(internal)
  // when the plugin fails to create.
  Detector create(std::string_view name, const DetectorSetup& setup) const;

 private:
  void consider_file(const std::filesystem::path& file);
  std::vector<SearchDirectory> dirs_;
  std::vector<PluginRecord> records_;
  std::vector<std::shared_ptr<const LoadedPlugin>> plugins_;
};

}  // namespace salvor::detect
