#pragma once
// Loads a detector plugin with dlopen (RTLD_LOCAL: plugins are never linked into a test,
// since every one exports salvor_detector_entry) and drives it through the C interface.
#include <dlfcn.h>
#include <gtest/gtest.h>

#include <algorithm>
#include <string>
#include <vector>

#include "detect/salvor_detector.h"

namespace trellis_test {

struct Plugin {
  void* lib = nullptr;
  const salvor_detector_api* api = nullptr;
  explicit Plugin(const std::string& name) {
    const std::string path = std::string(SALVOR_PLUGIN_BUILD_DIR) + "/" + name + ".so";
    lib = dlopen(path.c_str(), RTLD_NOW | RTLD_LOCAL);
    if (!lib) return;
    auto entry = reinterpret_cast<salvor_detector_entry_fn>(dlsym(lib, SALVOR_DETECTOR_ENTRY_NAME));
    if (entry) api = entry();
  }
  ~Plugin() {
    if (lib) dlclose(lib);
  }
  Plugin(const Plugin&) = delete;
  Plugin& operator=(const Plugin&) = delete;
};

struct Instance {
  const salvor_detector_api* api;
  void* h = nullptr;
  int status = SALVOR_OK;
  char err[256] = {0};
  Instance(const salvor_detector_api* a, const std::vector<salvor_param_value>& params,
           const std::vector<double>& target = {1, 1, -1, -1}, double sigma = 0.0)
      : api(a) {
    salvor_detector_config c{};
    c.struct_size = sizeof(c);
    c.target = target.empty() ? nullptr : target.data();
    c.target_len = target.size();
    c.noise_sigma = sigma;
    c.params = params.empty() ? nullptr : params.data();
    c.param_count = params.size();
    status = api->create(&c, &h, err, sizeof err);
  }
  ~Instance() {
    if (h) api->destroy(h);
  }
  // Runs samples through process() in chunks of `chunk`, then flush().
  void run(const std::vector<float>& y, const std::vector<uint8_t>& erasure, size_t chunk,
           std::vector<uint8_t>* bits, std::vector<float>* llr) {
    bits->clear();
    llr->clear();
    std::vector<uint8_t> b;
    std::vector<float> l;
    for (size_t pos = 0; pos < y.size(); pos += chunk) {
      const size_t n = std::min(chunk, y.size() - pos);
      salvor_detector_input in{y.data() + pos, erasure.empty() ? nullptr : erasure.data() + pos, n};
      b.assign(n + api->max_latency, 0);
      l.assign(b.size(), 0.0f);
      salvor_detector_output out{b.data(), l.data(), b.size(), 0};
      ASSERT_EQ(api->process(h, &in, &out, err, sizeof err), SALVOR_OK) << err;
      bits->insert(bits->end(), b.begin(), b.begin() + out.produced);
      llr->insert(llr->end(), l.begin(), l.begin() + out.produced);
    }
    b.assign(api->max_latency, 0);
    l.assign(b.size(), 0.0f);
    salvor_detector_output out{b.data(), l.data(), b.size(), 0};
    ASSERT_EQ(api->flush(h, &out, err, sizeof err), SALVOR_OK) << err;
    bits->insert(bits->end(), b.begin(), b.begin() + out.produced);
    llr->insert(llr->end(), l.begin(), l.begin() + out.produced);
  }
};

}  // namespace trellis_test
