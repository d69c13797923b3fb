// Re-decoding one capture for the report's waveform plots: see report_waveform.hpp.

#include "report_waveform.hpp"

#include <system_error>

#include "cli_common.hpp"
#include "common/error.hpp"
#include "common/sha256.hpp"
#include "detect/plugin_host.hpp"
#include "format/track_format.hpp"
#include "pipeline/job.hpp"

namespace salvor::cli {

namespace fs = std::filesystem;

namespace {

template <typename T>
void take(const nlohmann::json& j, const char* key, T& dst, const std::string& where) {
  auto it = j.find(key);
  if (it == j.end() || it->is_null()) return;
  try {
    dst = it->get<T>();
  } catch (const nlohmann::json::exception&) {
    throw_input(where, std::string("settings.") + key + ": unexpected value " + it->dump());
  }
}

std::string normal(const fs::path& p) { return fs::absolute(p).lexically_normal().string(); }

// The run.json input entry for a path, by exact path, then by a unique file name.
const nlohmann::json* find_input(const nlohmann::json& run, const std::string& path, const char* role) {
  auto inputs = run.find("inputs");
  if (inputs == run.end() || !inputs->is_array()) return nullptr;
  const nlohmann::json* by_name = nullptr;
  int name_hits = 0;
  const std::string want_name = fs::path(path).filename().string();
  for (const auto& in : *inputs) {
    if (!in.is_object() || in.value("role", "") != role) continue;
    std::string p = in.value("path", "");
    if (p == path || (!path.empty() && normal(p) == normal(path))) return &in;
    if (fs::path(p).filename().string() == want_name) { by_name = &in; ++name_hits; }
  }
  return name_hits == 1 ? by_name : nullptr;
}

const nlohmann::json* find_capture_summary(const nlohmann::json& run, const std::string& path) {
  auto caps = run.find("captures");
  if (caps == run.end() || !caps->is_array()) return nullptr;
  for (const auto& c : *caps)
    if (c.is_object() && (c.value("path", "") == path || normal(c.value("path", "")) == normal(path))) return &c;
  for (const auto& c : *caps)
    if (c.is_object() && fs::path(c.value("path", "")).filename() == fs::path(path).filename()) return &c;
  return nullptr;
}

void check_unchanged(const fs::path& file, const std::string& recorded, const char* what) {
  if (recorded.empty()) return;
  std::string now = sha256_file_hex(file);
  if (now != recorded)
    throw_input(file.string(), std::string(what) + " changed since the decode: SHA-256 is now " + now + ", run.json records " +
                                   recorded + "; re-run salvor decode, or restore the file");
}

format::TrackFormat format_of_run(const nlohmann::json& run, const fs::path& folder) {
  auto f = run.find("format");
  if (f == run.end() || !f->is_object()) throw_input((folder / "run.json").string(), "no \"format\" object");
  std::string path = f->value("path", ""), name = f->value("name", "");
  if (!path.empty() && fs::exists(path)) return format::load_track_format(path);
  if (name.empty()) throw_input((folder / "run.json").string(), "format has neither a readable path nor a name");
  return format::load_track_format(format::find_track_format(name));
}

}  // namespace

int nrz_period_bits(const std::vector<uint8_t>& p) {
  int ones = 0;
  for (uint8_t b : p) ones += b != 0;
  if (ones == 0) return 0;
  return static_cast<int>(p.size()) * (ones % 2 ? 2 : 1);
}

pipeline::DecodeSettings settings_from_json(const nlohmann::json& j, const std::string& where) {
  pipeline::DecodeSettings s;
  if (!j.is_object()) return s;
  take(j, "detector", s.detector, where);
  if (auto p = j.find("detector_params"); p != j.end() && p->is_object())
    for (const auto& [k, v] : p->items()) s.detector_params.emplace_back(k, v.is_string() ? v.get<std::string>() : v.dump());
  take(j, "target", s.target, where);
  take(j, "gpr_length", s.gpr_length, where);
  take(j, "coarse_detector", s.coarse_detector, where);
  take(j, "samples_per_bit", s.samples_per_bit, where);
  take(j, "pll_acquire_bandwidth", s.pll_acquire_bandwidth, where);
  take(j, "pll_track_bandwidth", s.pll_track_bandwidth, where);
  take(j, "pw50_bits", s.pw50_bits, where);
  take(j, "design_snr_db", s.design_snr_db, where);
  take(j, "equalizer_taps", s.equalizer_taps, where);
  take(j, "equalizer_step", s.equalizer_step, where);
  take(j, "training_epochs", s.training_epochs, where);
  take(j, "sync_tolerance", s.sync_tolerance, where);
  take(j, "erasure_search", s.erasure_search, where);
  if (auto b = j.find("bit_rate_hz"); b != j.end() && b->is_number()) s.bit_rate_hz = b->get<double>();
  return s;
}

std::optional<CaptureChoice> choose_capture(const nlohmann::json& run, const results::SectorAttempt& sector,
                                            std::string& why) {
  CaptureChoice c;
  const nlohmann::json* in = nullptr;
  if (!sector.capture.empty()) {
    in = find_input(run, sector.capture, "capture");
    c.same_sector = in != nullptr;
  }
  if (!in) {
    // The sector was never found (or its capture is not listed): any capture of its track
    // still shows the PLL, the equalizer and the spectrum of that track.
    if (auto caps = run.find("captures"); caps != run.end() && caps->is_array())
      for (const auto& s : *caps)
        if (s.is_object() && s.value("cylinder", -1) == sector.cylinder && s.value("head", -1) == sector.head) {
          in = find_input(run, s.value("path", ""), "capture");
          if (in) break;
        }
  }
  if (!in) {
    why = sector.capture.empty() ? "sector " + std::to_string(sector.lba) + " was never found and run.json lists no capture of its track"
                                 : "run.json does not list the capture " + sector.capture;
    return std::nullopt;
  }
  c.path = in->value("path", "");
  c.recorded_sha256 = in->value("sha256", "");
  if (const auto* sum = find_capture_summary(run, c.path.string())) {
    if (int v = sum->value("cylinder", -1); v >= 0) c.cylinder = v;
    if (int v = sum->value("head", -1); v >= 0) c.head = v;
    if (int v = sum->value("revolution", -1); v >= 0) c.revolution = v;
  }
  return c;
}

WaveformResult probe_sector_capture(const fs::path& folder, const nlohmann::json& run, const results::SectorAttempt& sector,
                                    size_t raw_samples_wanted) {
  WaveformResult r;
  auto choice = choose_capture(run, sector, r.why_not);
  if (!choice) return r;
  r.capture = *choice;
  std::error_code ec;
  if (!fs::is_regular_file(r.capture.path, ec)) {
    r.why_not = "the capture " + r.capture.path.string() + " is no longer there";
    return r;
  }
  check_unchanged(r.capture.path, r.capture.recorded_sha256, "the capture");
  fs::path side = r.capture.path;
  side += ".json";
  if (const auto* s = find_input(run, side.string(), "sidecar"); s && s->value("path", "") == side.string()) {
    if (!fs::is_regular_file(side, ec)) {
      r.why_not = "the capture's sidecar " + side.string() + " is no longer there";
      return r;
    }
    check_unchanged(side, s->value("sha256", ""), "the capture's sidecar");
  }

  pipeline::DecodeSettings settings = settings_from_json(run.value("settings", nlohmann::json::object()), (folder / "run.json").string());
  format::TrackFormat fmt = format_of_run(run, folder);
  std::vector<fs::path> search;
  for (const auto& d : plugin_search_dirs()) search.emplace_back(d);
  detect::PluginHost host(search);
  pipeline::CaptureDecoder decoder(fmt, host, settings);
  pipeline::JobCapture jc{r.capture.path, r.capture.cylinder, r.capture.head, r.capture.revolution};
  if (r.capture.same_sector) r.probe.eye_lba = sector.lba;
  r.probe.raw_samples_wanted = raw_samples_wanted;
  pipeline::CaptureResult cr = decoder.decode(jc, {}, &r.probe);
  r.target_name = cr.summary.target_name;
  r.preamble_period_bits = nrz_period_bits(fmt.preamble_pattern);
  r.gap_period_bits = nrz_period_bits(fmt.gap_pattern);
  r.available = true;
  return r;
}

}  // namespace salvor::cli
