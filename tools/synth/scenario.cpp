#include "synth/scenario.hpp"

#include <cmath>
#include <fstream>
#include <set>
#include <sstream>

#include <toml++/toml.h>

#include "common/error.hpp"

namespace salvor::synth {

namespace fs = std::filesystem;

namespace {

// Reads one TOML table, remembering which keys were asked for so leftovers can be refused.
class TableReader {
 public:
  TableReader(const toml::table* t, std::string where, std::string file)
      : t_(t), where_(std::move(where)), file_(std::move(file)) {}

  bool has(const std::string& key) {
    seen_.insert(key);
    return t_ && t_->contains(key);
  }
  [[noreturn]] void fail(const std::string& key, const std::string& what) const {
    throw_input(file_, key_name(key) + ": " + what);
  }
  std::string key_name(const std::string& key) const { return where_.empty() ? key : where_ + "." + key; }

  double number(const std::string& key, double def, double lo, double hi) {
    if (!has(key)) return def;
    const toml::node& n = *t_->get(key);
    std::optional<double> v;
    if (n.is_floating_point()) v = n.as_floating_point()->get();
    else if (n.is_integer()) v = static_cast<double>(n.as_integer()->get());
    if (!v) fail(key, "expected a number");
    if (!std::isfinite(*v) || *v < lo || *v > hi) {
      std::ostringstream m;
      m << "value " << *v << " is outside " << lo << ".." << hi;
      fail(key, m.str());
    }
    return *v;
  }
  std::optional<double> optional_number(const std::string& key, double lo, double hi) {
    if (!has(key)) return std::nullopt;
    return number(key, 0, lo, hi);
  }
  int64_t integer(const std::string& key, int64_t def, int64_t lo, int64_t hi) {
    if (!has(key)) return def;
    const toml::node& n = *t_->get(key);
    if (!n.is_integer()) fail(key, "expected an integer");
    const int64_t v = n.as_integer()->get();
    if (v < lo || v > hi) fail(key, "value " + std::to_string(v) + " is outside " + std::to_string(lo) + ".." + std::to_string(hi));
    return v;
  }
  std::string text(const std::string& key, const std::string& def) {
    if (!has(key)) return def;
    const toml::node& n = *t_->get(key);
    if (!n.is_string()) fail(key, "expected a string");
    return n.as_string()->get();
  }
  std::vector<int64_t> integers(const std::string& key, int64_t lo, int64_t hi) {
    std::vector<int64_t> out;
    if (!has(key)) return out;
    const toml::array* a = t_->get(key)->as_array();
    if (!a) fail(key, "expected an array of integers");
    for (const toml::node& n : *a) {
      if (!n.is_integer()) fail(key, "expected an array of integers");
      const int64_t v = n.as_integer()->get();
      if (v < lo || v > hi) fail(key, "entry " + std::to_string(v) + " is outside " + std::to_string(lo) + ".." + std::to_string(hi));
      out.push_back(v);
    }
    return out;
  }
  const toml::table* subtable(const std::string& key) {
    if (!has(key)) return nullptr;
    const toml::table* s = t_->get(key)->as_table();
    if (!s) fail(key, "expected a table");
    return s;
  }
  // Refuses keys nobody asked for.
  void finish() const {
    if (!t_) return;
    for (const auto& [k, v] : *t_) {
      const std::string key(k.str());
      if (!seen_.count(key)) fail(key, "unknown key (see corpora/scenarios/README.md)");
    }
  }

 private:
  const toml::table* t_;
  std::string where_, file_;
  std::set<std::string> seen_;
};

std::vector<const toml::table*> table_array(TableReader& top, const toml::table& root, const std::string& key,
                                            const std::string& file) {
  std::vector<const toml::table*> out;
  if (!top.has(key)) return out;
  const toml::array* a = root.get(key)->as_array();
  if (!a) throw_input(file, key + ": expected an array of tables ([[" + key + "]])");
  for (const toml::node& n : *a) {
    const toml::table* t = n.as_table();
    if (!t) throw_input(file, key + ": expected an array of tables ([[" + key + "]])");
    out.push_back(t);
  }
  return out;
}

}  // namespace

Scenario parse_scenario(const std::string& text, const fs::path& origin) {
  const std::string file = origin.string();
  toml::table root;
  try {
    root = toml::parse(text, file);
  } catch (const toml::parse_error& e) {
    std::ostringstream m;
    m << "line " << e.source().begin.line << ": " << e.description();
    throw_input(file, m.str());
  }
  Scenario s;
  s.source = origin;
  TableReader top(&root, "", file);

  {
    TableReader r(top.subtable("scenario"), "scenario", file);
    s.name = r.text("name", origin.stem().string());
    s.description = r.text("description", "");
    s.format = r.text("format", "");
    if (s.format.empty()) r.fail("format", "missing: the track format descriptor name or path");
    s.seed = static_cast<uint64_t>(r.integer("seed", 1, 0, INT64_MAX));
    s.revolutions = static_cast<int>(r.integer("revolutions", 1, 1, 16));
    s.image = r.text("image", "random");
    if (s.image != "survey-archive" && s.image != "random" && s.image != "zeros")
      r.fail("image", "'" + s.image + "' is not one of survey-archive, random, zeros");
    r.finish();
  }
  {
    TableReader r(top.subtable("tracks"), "tracks", file);
    auto cyl = r.integers("cylinders", 0, 1 << 20);
    if (!cyl.empty()) {
      if (cyl.size() != 2 || cyl[0] > cyl[1]) r.fail("cylinders", "expected [first, last] with first <= last");
      s.first_cylinder = static_cast<int>(cyl[0]);
      s.last_cylinder = static_cast<int>(cyl[1]);
    }
    for (int64_t h : r.integers("heads", 0, 255)) s.heads.push_back(static_cast<int>(h));
    r.finish();
  }
  {
    TableReader r(top.subtable("capture"), "capture", file);
    s.container = container_from_string(r.text("container", "flac"), file + ": capture.container");
    s.sample_format = sample_format_from_string(r.text("sample_format", "int16"), file + ": capture.sample_format");
    s.samples_per_bit = r.optional_number("samples_per_bit", 2.0, 8.0);
    s.sample_rate_hz = r.optional_number("sample_rate_hz", 1.0, 1e12);
    if (s.samples_per_bit && s.sample_rate_hz) r.fail("sample_rate_hz", "give samples_per_bit or sample_rate_hz, not both");
    if (!s.samples_per_bit && !s.sample_rate_hz) s.samples_per_bit = 2.5;
    s.full_scale = r.number("full_scale", 2.0, 0.01, 1000);
    s.lead_bits = r.number("lead_bits", 1000, 0, 1e7);
    s.tail_bits = r.number("tail_bits", 1000, 0, 1e7);
    r.finish();
  }
  {
    TableReader r(top.subtable("channel"), "channel", file);
    s.model = pulse_model_from_string(r.text("model", "lorentzian"), file + ": channel.model");
    s.density = r.number("density", 2.0, 0.5, 6.0);
    s.span_widths = r.number("span", s.model == PulseModel::lorentzian ? 10.0 : 4.0, 2, 100);
    s.amplitude = r.number("amplitude", 1.0, 1e-3, 1e3);
    s.snr_db = r.optional_number("snr_db", -20, 200);
    s.media.jitter_bits = r.number("jitter", 0, 0, 0.5);
    s.media.width_sigma = r.number("width_variation", 0, 0, 0.5);
    s.front_end.mr_asymmetry = r.number("mr_asymmetry", 0, -0.5, 0.5);
    s.front_end.dc_offset = r.number("dc_offset", 0, -10, 10);
    if (const toml::table* w = r.subtable("baseline_wander")) {
      TableReader b(w, "channel.baseline_wander", file);
      const std::string kind = b.text("kind", "sine");
      if (kind == "sine") {
        s.front_end.wander = WanderKind::sine;
        s.front_end.wander_period_bits = b.number("period_bits", 20000, 10, 1e9);
      } else if (kind == "random") {
        s.front_end.wander = WanderKind::random;
        s.front_end.wander_corner_rel = b.number("corner", 1e-4, 1e-7, 0.099);
      } else {
        b.fail("kind", "'" + kind + "' is not sine or random");
      }
      s.front_end.wander_amplitude = b.number("amplitude", 0.05, 0, 10);
      b.finish();
    }
    if (const toml::table* l = r.subtable("lowpass")) {
      TableReader b(l, "channel.lowpass", file);
      s.front_end.lowpass_order = static_cast<int>(b.integer("order", 4, 1, 12));
      s.front_end.lowpass_corner_rel = b.number("corner", 0.6, 0.05, 10);
      b.finish();
    }
    r.finish();
  }
  {
    TableReader r(top.subtable("spindle"), "spindle", file);
    s.spindle.offset_ppm = r.number("offset_ppm", 0, -5000, 5000);
    s.spindle.revolution_sigma_ppm = r.number("revolution_sigma_ppm", 0, 0, 1000);
    s.spindle.drift_ppm = r.number("drift_ppm", 0, 0, 5000);
    s.spindle.drift_period_revolutions = r.number("drift_period_revolutions", 3.0, 0.01, 1e6);
    r.finish();
  }
  {
    TableReader r(top.subtable("offtrack"), "offtrack", file);
    s.offtrack.fraction = r.number("fraction", 0, 0, 0.5);
    s.offtrack.side = static_cast<int>(r.integer("side", 1, -1, 1));
    if (s.offtrack.side == 0) r.fail("side", "must be +1 or -1");
    for (int64_t h : r.integers("heads", 0, 255)) s.offtrack.heads.push_back(static_cast<int>(h));
    r.finish();
  }
  for (const toml::table* t : table_array(top, root, "scratch", file)) {
    TableReader r(t, "scratch", file);
    ScratchSpec d;
    d.head = static_cast<int>(r.integer("head", 0, 0, 255));
    auto cyl = r.integers("cylinders", 0, 1 << 20);
    if (cyl.size() != 2 || cyl[0] > cyl[1]) r.fail("cylinders", "expected [first, last] with first <= last");
    d.first_cylinder = static_cast<int>(cyl[0]);
    d.last_cylinder = static_cast<int>(cyl[1]);
    d.start_deg = r.number("start_deg", 0, 0, 360);
    d.length_deg = r.number("length_deg", 1, 1e-4, 180);
    d.skew_deg_per_cylinder = r.number("skew_deg_per_cylinder", 0, -10, 10);
    d.depth = r.number("depth", 0.9, 0, 1);
    d.edge_bits = r.number("edge_bits", 100, 0, 1e6);
    r.finish();
    s.scratches.push_back(d);
  }
  for (const toml::table* t : table_array(top, root, "thermal_asperity", file)) {
    TableReader r(t, "thermal_asperity", file);
    AsperitySpec a;
    a.cylinder = static_cast<int>(r.integer("cylinder", 0, 0, 1 << 20));
    a.head = static_cast<int>(r.integer("head", 0, 0, 255));
    a.position_deg = r.number("position_deg", 0, 0, 360);
    a.amplitude = r.number("amplitude", 1.0, -20, 20);
    a.rise_bits = r.number("rise_bits", 4, 0, 1e5);
    a.decay_bits = r.number("decay_bits", 300, 1, 1e7);
    for (int64_t v : r.integers("revolutions", 0, 15)) a.revolutions.push_back(static_cast<int>(v));
    r.finish();
    s.asperities.push_back(a);
  }
  for (const toml::table* t : table_array(top, root, "defect", file)) {
    TableReader r(t, "defect", file);
    DefectSpec d;
    d.cylinder = static_cast<int>(r.integer("cylinder", 0, 0, 1 << 20));
    d.head = static_cast<int>(r.integer("head", 0, 0, 255));
    d.start_deg = r.number("start_deg", 0, 0, 360);
    d.length_deg = r.number("length_deg", 0.5, 1e-4, 180);
    d.noise_rms = r.number("noise_rms", 0.3, 0, 10);
    r.finish();
    s.defects.push_back(d);
  }
  for (const toml::table* t : table_array(top, root, "weak_head", file)) {
    TableReader r(t, "weak_head", file);
    WeakHeadSpec w;
    w.head = static_cast<int>(r.integer("head", 0, 0, 255));
    w.snr_loss_db = r.number("snr_loss_db", 3, 0, 60);
    w.amplitude_factor = r.number("amplitude_factor", 1.0, 0.01, 1.0);
    r.finish();
    s.weak_heads.push_back(w);
  }
  top.finish();
  return s;
}

Scenario load_scenario(const fs::path& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) throw_input(path.string(), "cannot open scenario file");
  std::ostringstream ss;
  ss << in.rdbuf();
  if (in.bad()) throw_input(path.string(), "read failed");
  return parse_scenario(ss.str(), path);
}

fs::path find_scenario(const std::string& name) {
  if (name.empty()) throw_usage("--scenario", "empty scenario name");
  const bool looks_like_path = name.find('/') != std::string::npos || fs::path(name).extension() == ".toml";
  if (looks_like_path) {
    if (!fs::exists(name)) throw_input(name, "scenario file not found");
    return name;
  }
  std::vector<fs::path> dirs;
#ifdef SALVOR_SCENARIO_SOURCE_DIR
  dirs.emplace_back(SALVOR_SCENARIO_SOURCE_DIR);
#endif
#ifdef SALVOR_SCENARIO_INSTALL_DIR
  dirs.emplace_back(SALVOR_SCENARIO_INSTALL_DIR);
#endif
  std::string tried;
  for (const fs::path& d : dirs) {
    const fs::path p = d / (name + ".toml");
    if (fs::exists(p)) return p;
    tried += (tried.empty() ? "" : ", ") + p.string();
  }
  throw_usage("--scenario", "no scenario named '" + name + "' (looked for " + tried + ")");
}

nlohmann::json scenario_json(const Scenario& s) {
  using nlohmann::json;
  json j;
  j["name"] = s.name;
  j["format"] = s.format;
  j["seed"] = s.seed;
  j["revolutions"] = s.revolutions;
  j["image"] = s.image;
  j["capture"] = {{"container", to_string(s.container)},
                  {"sample_format", to_string(s.sample_format)},
                  {"full_scale", s.full_scale},
                  {"lead_bits", s.lead_bits},
                  {"tail_bits", s.tail_bits}};
  if (s.samples_per_bit) j["capture"]["samples_per_bit"] = *s.samples_per_bit;
  if (s.sample_rate_hz) j["capture"]["sample_rate_hz"] = *s.sample_rate_hz;
  json ch = {{"model", to_string(s.model)},
             {"density", s.density},
             {"span", s.span_widths},
             {"amplitude", s.amplitude},
             {"snr_db", s.snr_db ? json(*s.snr_db) : json(nullptr)},
             {"jitter", s.media.jitter_bits},
             {"width_variation", s.media.width_sigma},
             {"mr_asymmetry", s.front_end.mr_asymmetry},
             {"dc_offset", s.front_end.dc_offset}};
  if (s.front_end.wander == WanderKind::sine)
    ch["baseline_wander"] = {{"kind", "sine"}, {"amplitude", s.front_end.wander_amplitude},
                             {"period_bits", s.front_end.wander_period_bits}};
  else if (s.front_end.wander == WanderKind::random)
    ch["baseline_wander"] = {{"kind", "random"}, {"amplitude", s.front_end.wander_amplitude},
                             {"corner", s.front_end.wander_corner_rel}};
  if (s.front_end.lowpass_order > 0)
    ch["lowpass"] = {{"kind", "butterworth"}, {"order", s.front_end.lowpass_order},
                     {"corner", s.front_end.lowpass_corner_rel}};
  j["channel"] = ch;
  j["spindle"] = {{"offset_ppm", s.spindle.offset_ppm},
                  {"revolution_sigma_ppm", s.spindle.revolution_sigma_ppm},
                  {"drift_ppm", s.spindle.drift_ppm},
                  {"drift_period_revolutions", s.spindle.drift_period_revolutions}};
  j["offtrack"] = {{"fraction", s.offtrack.fraction}, {"side", s.offtrack.side}, {"heads", s.offtrack.heads}};
  json sc = json::array();
  for (const auto& d : s.scratches)
    sc.push_back({{"head", d.head}, {"cylinders", {d.first_cylinder, d.last_cylinder}}, {"start_deg", d.start_deg},
                  {"length_deg", d.length_deg}, {"skew_deg_per_cylinder", d.skew_deg_per_cylinder},
                  {"depth", d.depth}, {"edge_bits", d.edge_bits}});
  j["scratch"] = sc;
  json ta = json::array();
  for (const auto& a : s.asperities)
    ta.push_back({{"cylinder", a.cylinder}, {"head", a.head}, {"position_deg", a.position_deg},
                  {"amplitude", a.amplitude}, {"rise_bits", a.rise_bits}, {"decay_bits", a.decay_bits},
                  {"revolutions", a.revolutions}});
  j["thermal_asperity"] = ta;
  json df = json::array();
  for (const auto& d : s.defects)
    df.push_back({{"cylinder", d.cylinder}, {"head", d.head}, {"start_deg", d.start_deg},
                  {"length_deg", d.length_deg}, {"noise_rms", d.noise_rms}});
  j["defect"] = df;
  json wh = json::array();
  for (const auto& w : s.weak_heads)
    wh.push_back({{"head", w.head}, {"snr_loss_db", w.snr_loss_db}, {"amplitude_factor", w.amplitude_factor}});
  j["weak_head"] = wh;
  return j;
}

}  // namespace salvor::synth
