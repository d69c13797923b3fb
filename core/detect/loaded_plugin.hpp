#pragma once
// Internal to the host: one dlopen'ed plugin. Shared by the host and every instance made
// from it, so the library stays mapped while an instance lives.

#include "detect/plugin_host.hpp"

namespace salvor::detect {

struct LoadedPlugin {
  void* handle = nullptr;                    // from dlopen; dlclose'd on destruction
  const salvor_detector_api* api = nullptr;  // the plugin's static table
  DetectorInfo info;                         // copied out of the table, checked
  LoadedPlugin() = default;
  LoadedPlugin(const LoadedPlugin&) = delete;
  LoadedPlugin& operator=(const LoadedPlugin&) = delete;
  ~LoadedPlugin();
};

}  // namespace salvor::detect
