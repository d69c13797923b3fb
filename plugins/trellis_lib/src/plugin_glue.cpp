#include "trellis/plugin_glue.hpp"

#include <cmath>

namespace salvor::trellis::plugin {

std::vector<double> parse_params(const char* plugin, const salvor_param_desc* table, size_t n,
                                 const salvor_detector_config* config) {
  if (!config) throw_usage(plugin, "create: configuration pointer is NULL");
  if (config->struct_size < sizeof(salvor_detector_config))
    throw_usage(plugin, "create: configuration struct_size " + std::to_string(config->struct_size) +
                            " is smaller than " + std::to_string(sizeof(salvor_detector_config)));
  std::vector<double> values(n);
  std::vector<bool> seen(n, false);
  for (size_t i = 0; i < n; ++i) values[i] = table[i].default_value;
  if (config->param_count && !config->params)
    throw_usage(plugin, "create: param_count is " + std::to_string(config->param_count) +
                            " but the params pointer is NULL");
  for (size_t k = 0; k < config->param_count; ++k) {
    const salvor_param_value& pv = config->params[k];
    if (!pv.key) throw_usage(plugin, "parameter " + std::to_string(k) + " has no key");
    const std::string key = pv.key;
    size_t i = 0;
    while (i < n && key != table[i].key) ++i;
    if (i == n) {
      std::string known;
      for (size_t t = 0; t < n; ++t) known += (t ? ", " : "") + std::string(table[t].key);
      throw_usage(plugin, "unknown parameter '" + key + "' (known: " + known + ")");
    }
    if (seen[i]) throw_usage(plugin, "parameter '" + key + "' is given twice");
    seen[i] = true;
    const salvor_param_desc& d = table[i];
    const double v = pv.value;
    if (!std::isfinite(v)) throw_usage(plugin, "parameter '" + key + "' is not a finite number");
    auto num = [](double x) {
      std::string s = std::to_string(x);
      while (s.size() > 1 && s.back() == '0') s.pop_back();
      if (!s.empty() && s.back() == '.') s.pop_back();
      return s;
    };
    switch (d.type) {
      case SALVOR_PARAM_BOOL:
        if (v != 0.0 && v != 1.0)
          throw_usage(plugin, "parameter '" + key + "' is " + num(v) + "; a switch is 0 or 1");
        break;
      case SALVOR_PARAM_INT:
      case SALVOR_PARAM_CHOICE:
        if (v != std::floor(v))
          throw_usage(plugin, "parameter '" + key + "' is " + num(v) + "; it must be a whole number");
        [[fallthrough]];
      default:
        if (v < d.min_value || v > d.max_value)
          throw_usage(plugin, "parameter '" + key + "' is " + num(v) + ", outside " +
                                  num(d.min_value) + ".." + num(d.max_value));
    }
    values[i] = v;
  }
  return values;
}

std::vector<double> target_of(const char* plugin, const salvor_detector_config* config) {
  if (!config->target || config->target_len == 0)
    throw_usage(plugin, "create: a trellis detector needs a target (1.." +
                            std::to_string(SALVOR_MAX_TARGET_TAPS) + " taps); none was given");
  if (config->target_len > SALVOR_MAX_TARGET_TAPS)
    throw_usage(plugin, "create: target has " + std::to_string(config->target_len) +
                            " taps; at most " + std::to_string(SALVOR_MAX_TARGET_TAPS) +
                            " (32 states)");
  std::vector<double> t(config->target, config->target + config->target_len);
  bool any = false;
  for (size_t i = 0; i < t.size(); ++i) {
    if (!std::isfinite(t[i]))
      throw_usage(plugin, "create: target tap " + std::to_string(i) + " is not a finite number");
    any = any || t[i] != 0.0;
  }
  if (!any) throw_usage(plugin, "create: every target tap is zero");
  return t;
}

double sigma_of(const char* plugin, const salvor_detector_config* config) {
  if (!std::isfinite(config->noise_sigma))
    throw_usage(plugin, "create: noise_sigma is not a finite number");
  return config->noise_sigma > 0.0 ? config->noise_sigma : 0.0;
}

}  // namespace salvor::trellis::plugin
