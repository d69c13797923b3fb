#include "synth/synth_run.hpp"

#include <algorithm>
#include <cmath>
#include <fstream>
#include <numbers>
#include <sstream>

#include "common/atomic_file.hpp"
#include "common/error.hpp"
#include "common/sha256.hpp"
#include "common/version.hpp"
#include "format/track_codec.hpp"
#include "format/track_format.hpp"
#include "synth/rng.hpp"
#include "synth/ustar.hpp"

namespace salvor::synth {

namespace fs = std::filesystem;
using nlohmann::json;

namespace {

std::string track_stem(int c, int h) {
  char b[32];
  std::snprintf(b, sizeof b, "c%03d-h%d", c, h);
  return b;
}

std::vector<uint8_t> make_image(const Scenario& s, uint64_t seed, uint64_t bytes) {
  std::vector<uint8_t> img(bytes, 0);
  if (s.image == "random") {
    RandomStream r(derive_seed(seed, {static_cast<uint64_t>(StreamKind::image), 0}));
    for (size_t i = 0; i < img.size(); i += 8) {
      const uint64_t v = r.next_u64();
      for (size_t b = 0; b < 8 && i + b < img.size(); ++b) img[i + b] = static_cast<uint8_t>(v >> (8 * b));
    }
  } else if (s.image == "survey-archive") {
    const std::vector<uint8_t> tar = build_ustar(demo_archive_members(seed));
    if (tar.size() > img.size())
      throw_usage(s.source.string(), "the survey archive (" + std::to_string(tar.size()) +
                                         " bytes) does not fit the image of " + std::to_string(bytes) + " bytes");
    std::copy(tar.begin(), tar.end(), img.begin());
  }
  return img;
}

// A damaged span of one track within one revolution, in bit positions [a, b).
struct DamageSpan {
  std::string kind;
  double a, b;
  json detail;
};

// Splits a span that runs past the end of the track into two.
void add_wrapped(std::vector<DamageSpan>& v, DamageSpan d, double L) {
  d.a = std::fmod(d.a, L);
  if (d.a < 0) d.a += L;
  const double len = d.b;  // caller passes the length in b
  d.b = d.a + len;
  if (d.b <= L) {
    v.push_back(d);
  } else {
    DamageSpan tail = d;
    d.b = L;
    tail.a = 0;
    tail.b = d.a + len - L;
    v.push_back(d);
    v.push_back(tail);
  }
}

double deg_to_bits(double deg, double L) { return deg / 360.0 * L; }

}  // namespace

std::vector<uint8_t> pack_bits_msb_first(const std::vector<uint8_t>& bits) {
  std::vector<uint8_t> out((bits.size() + 7) / 8, 0);
  for (size_t n = 0; n < bits.size(); ++n)
    if (bits[n]) out[n / 8] |= static_cast<uint8_t>(0x80u >> (n % 8));
  return out;
}

std::vector<std::pair<int, int>> parse_track_list(const std::string& text, int cylinders, int heads) {
  std::vector<std::pair<int, int>> out;
  auto range = [&](const std::string& part, int count, const char* what) -> std::pair<int, int> {
    if (part == "*") return {0, count - 1};
    const size_t dash = part.find('-');
    try {
      size_t used = 0;
      const int a = std::stoi(part.substr(0, dash), &used);
      if (used != (dash == std::string::npos ? part.size() : dash)) throw std::invalid_argument(part);
      int b = a;
      if (dash != std::string::npos) {
        const std::string rest = part.substr(dash + 1);
        b = std::stoi(rest, &used);
        if (used != rest.size()) throw std::invalid_argument(part);
      }
      if (a < 0 || b < a || b >= count)
        throw_usage("--tracks", std::string(what) + " '" + part + "' is outside 0.." + std::to_string(count - 1));
      return {a, b};
    } catch (const std::logic_error&) {
      throw_usage("--tracks", "'" + part + "' is not a number, a range a-b or *");
    }
  };
  std::stringstream ss(text);
  std::string item;
  while (std::getline(ss, item, ',')) {
    const size_t colon = item.find(':');
    if (colon == std::string::npos) throw_usage("--tracks", "'" + item + "' is not CYLINDER:HEAD");
    const auto [c0, c1] = range(item.substr(0, colon), cylinders, "cylinder");
    const auto [h0, h1] = range(item.substr(colon + 1), heads, "head");
    for (int c = c0; c <= c1; ++c)
      for (int h = h0; h <= h1; ++h)
        if (std::find(out.begin(), out.end(), std::make_pair(c, h)) == out.end()) out.emplace_back(c, h);
  }
  if (out.empty()) throw_usage("--tracks", "no tracks selected");
  return out;
}

RunSummary run_scenario(const Scenario& sc, const RunOptions& opt) {
  // ---- resolve the format and the settings ---------------------------------------------
  fs::path format_path;
  if (sc.format.find('/') != std::string::npos || fs::path(sc.format).extension() == ".toml") {
    format_path = fs::path(sc.format).is_absolute() ? fs::path(sc.format) : sc.source.parent_path() / sc.format;
  } else {
    format_path = format::find_track_format(sc.format);
  }
  const format::TrackFormat fmt = format::load_track_format(format_path);
  const format::TrackLayout layout = format::layout_track(fmt);
  const uint64_t seed = opt.seed.value_or(sc.seed);
  const Container container = opt.container.value_or(sc.container);
  const SampleFormat sample_format = opt.sample_format.value_or(sc.sample_format);
  const int revolutions = opt.revolutions.value_or(sc.revolutions);
  if (revolutions < 1 || revolutions > 16) throw_usage("--revolutions", "must lie in 1..16");
  const double f0 = fmt.bit_rate_hz;
  const double spb = sc.samples_per_bit ? *sc.samples_per_bit : *sc.sample_rate_hz / f0;
  if (!(spb >= 1.0 && spb <= 16.0))
    throw_usage(sc.source.string(), "capture.sample_rate_hz gives " + std::to_string(spb) +
                                        " samples per bit at the format's bit rate; expected 1..16");
  const double fs_hz = spb * f0;
  const double L = static_cast<double>(fmt.bits_per_track);

  std::vector<std::pair<int, int>> tracks;
  if (opt.tracks) {
    tracks = *opt.tracks;
  } else {
    const int c0 = sc.first_cylinder < 0 ? 0 : sc.first_cylinder;
    const int c1 = sc.last_cylinder < 0 ? fmt.cylinders - 1 : sc.last_cylinder;
    std::vector<int> heads = sc.heads;
    if (heads.empty())
      for (int h = 0; h < fmt.heads; ++h) heads.push_back(h);
    for (int c = c0; c <= c1; ++c)
      for (int h : heads) tracks.emplace_back(c, h);
  }
  for (auto [c, h] : tracks)
    if (c < 0 || c >= fmt.cylinders || h < 0 || h >= fmt.heads)
      throw_usage(sc.source.string(), "track " + std::to_string(c) + ":" + std::to_string(h) + " is outside the " +
                                          fmt.name + " geometry (" + std::to_string(fmt.cylinders) + " cylinders, " +
                                          std::to_string(fmt.heads) + " heads)");
  for (const auto& d : sc.scratches)
    if (d.head >= fmt.heads || d.last_cylinder >= fmt.cylinders)
      throw_usage(sc.source.string(), "scratch: head or cylinders outside the format's geometry");

  // ---- the output folder ----------------------------------------------------------------
  const fs::path out = opt.out;
  std::error_code ec;
  if (fs::exists(out)) {
    if (!fs::is_directory(out)) throw_output(out.string(), "exists and is not a folder");
    const bool empty = fs::is_empty(out);
    if (!empty) {
      if (!opt.overwrite)
        throw_output(out.string(), "folder is not empty (use --overwrite to replace an earlier synth output)");
      if (!fs::exists(out / "manifest.json"))
        throw_output(out.string(), "--overwrite only replaces an earlier synth output (no manifest.json here)");
      for (const char* sub : {"captures", "truth"}) fs::remove_all(out / sub, ec);
      fs::remove(out / "manifest.json", ec);
      fs::remove(out / "format.toml", ec);
    }
  }
  for (const fs::path& p : {out, out / "captures", out / "truth"}) {
    fs::create_directories(p, ec);
    if (ec) throw_output(p.string(), "cannot create folder: " + ec.message());
  }
  if (opt.bitstreams) {
    fs::create_directories(out / "truth" / "bits", ec);
    if (ec) throw_output((out / "truth" / "bits").string(), "cannot create folder: " + ec.message());
  }
  {
    std::ifstream in(format_path, std::ios::binary);
    std::ostringstream ss;
    ss << in.rdbuf();
    if (!in) throw_input(format_path.string(), "cannot read the descriptor to copy it");
    write_file_atomic(out / "format.toml", ss.str());
  }
  const std::vector<uint8_t> image = make_image(sc, seed, fmt.image_bytes());
  write_file_atomic(out / "truth" / "image.bin",
                    std::string_view(reinterpret_cast<const char*>(image.data()), image.size()));

  const json scenario_params = scenario_json(sc);
  json damage_sectors = json::array();
  json manifest_captures = json::array();
  json bits_files = json::array();
  RunSummary summary;
  summary.scenario = sc.name;
  summary.seed = seed;
  std::vector<float> chunk(std::max<size_t>(opt.chunk_samples, 1));

  for (auto [cyl, head] : tracks) {
    const std::vector<uint8_t> bits = format::encode_track(fmt, image, cyl, head);
    if (bits.size() != fmt.bits_per_track) throw_internal("encode_track returned a track of the wrong length");
    const MediaNoise media = sc.media;
    const WrittenTrack written =
        write_track(bits, media, derive_seed(seed, {static_cast<uint64_t>(StreamKind::media_noise), uint64_t(cyl), uint64_t(head)}),
                    fmt.initial_level);
    if (opt.bitstreams) {
      const std::vector<uint8_t> packed = pack_bits_msb_first(bits);
      const std::string name = track_stem(cyl, head) + ".bits";
      write_file_atomic(out / "truth" / "bits" / name,
                        std::string_view(reinterpret_cast<const char*>(packed.data()), packed.size()));
      bits_files.push_back({{"path", name}, {"cylinder", cyl}, {"head", head}});
    }

    // Off-track neighbour.
    const bool offtrack = sc.offtrack.fraction > 0 && fmt.cylinders > 1 &&
                          (sc.offtrack.heads.empty() ||
                           std::find(sc.offtrack.heads.begin(), sc.offtrack.heads.end(), head) != sc.offtrack.heads.end());
    int nb_cyl = -1;
    std::optional<WrittenTrack> nb_written;
    if (offtrack) {
      nb_cyl = cyl + sc.offtrack.side;
      if (nb_cyl < 0 || nb_cyl >= fmt.cylinders) nb_cyl = cyl - sc.offtrack.side;
      const std::vector<uint8_t> nb_bits = format::encode_track(fmt, image, nb_cyl, head);
      nb_written = write_track(
          nb_bits, media, derive_seed(seed, {static_cast<uint64_t>(StreamKind::media_noise), uint64_t(nb_cyl), uint64_t(head)}),
          fmt.initial_level);
    }

    // Damage on this track (positions within the revolution).
    auto scratch_dropouts = [&](int c) {
      std::vector<AmplitudeDropout> v;
      for (const auto& d : sc.scratches) {
        if (d.head != head || c < d.first_cylinder || c > d.last_cylinder) continue;
        const double start = deg_to_bits(d.start_deg + d.skew_deg_per_cylinder * (c - d.first_cylinder), L);
        v.push_back({std::fmod(std::fmod(start, L) + L, L), deg_to_bits(d.length_deg, L), d.depth,
                     std::min(d.edge_bits, deg_to_bits(d.length_deg, L) / 2)});
      }
      return v;
    };
    const std::vector<AmplitudeDropout> dropouts = scratch_dropouts(cyl);
    const std::vector<AmplitudeDropout> nb_dropouts = offtrack ? scratch_dropouts(nb_cyl) : std::vector<AmplitudeDropout>{};
    std::vector<DefectSpan> defects;
    for (const auto& d : sc.defects)
      if (d.cylinder == cyl && d.head == head)
        defects.push_back({deg_to_bits(d.start_deg, L), deg_to_bits(d.length_deg, L), d.noise_rms});

    double snr_loss = 0, amp_factor = 1.0;
    for (const auto& w : sc.weak_heads)
      if (w.head == head) {
        snr_loss += w.snr_loss_db;
        amp_factor *= w.amplitude_factor;
      }
    const double drift_phase0 =
        2.0 * std::numbers::pi *
        RandomStream(derive_seed(seed, {static_cast<uint64_t>(StreamKind::drift_phase), uint64_t(cyl), uint64_t(head)})).uniform();

    for (int rev = 0; rev < revolutions; ++rev) {
      RenderConfig rc;
      rc.model = sc.model;
      rc.density = sc.density;
      rc.span_widths = sc.span_widths;
      rc.amplitude = sc.amplitude * amp_factor;
      rc.samples_per_bit = spb;
      rc.lead_bits = sc.lead_bits;
      rc.tail_bits = sc.tail_bits;
      RandomStream spindle_rng(derive_seed(seed, {static_cast<uint64_t>(StreamKind::spindle), uint64_t(cyl), uint64_t(head), uint64_t(rev)}));
      const double rev_ppm = sc.spindle.offset_ppm + sc.spindle.revolution_sigma_ppm * spindle_rng.gaussian();
      rc.spindle.offset = rev_ppm * 1e-6;
      rc.spindle.drift = sc.spindle.drift_ppm * 1e-6;
      rc.spindle.drift_period_bits = sc.spindle.drift_period_revolutions * L;
      // The drift runs on across revolutions: revolution r starts r/P of a drift period later.
      rc.spindle.drift_phase = std::fmod(drift_phase0 + 2.0 * std::numbers::pi * rev / sc.spindle.drift_period_revolutions,
                                         2.0 * std::numbers::pi);
      RandomStream sampling_rng(derive_seed(seed, {static_cast<uint64_t>(StreamKind::sampling), uint64_t(cyl), uint64_t(head), uint64_t(rev)}));
      rc.sampling_phase = sampling_rng.uniform();
      if (sc.snr_db) rc.noise.snr_db = *sc.snr_db - snr_loss;
      rc.front_end = sc.front_end;
      rc.digitizer = {sample_format, sc.full_scale};
      rc.offtrack_fraction = offtrack ? sc.offtrack.fraction : 0.0;
      rc.dropouts = dropouts;
      rc.neighbour_dropouts = nb_dropouts;
      rc.defects = defects;
      for (const auto& a : sc.asperities) {
        if (a.cylinder != cyl || a.head != head) continue;
        if (!a.revolutions.empty() && std::find(a.revolutions.begin(), a.revolutions.end(), rev) == a.revolutions.end())
          continue;
        rc.asperities.push_back({deg_to_bits(a.position_deg, L), a.amplitude, a.rise_bits, a.decay_bits});
      }
      rc.noise_seed = derive_seed(seed, {static_cast<uint64_t>(StreamKind::electronic_noise), uint64_t(cyl), uint64_t(head), uint64_t(rev)});
      rc.aux_seed = derive_seed(seed, {static_cast<uint64_t>(StreamKind::defect), uint64_t(cyl), uint64_t(head), uint64_t(rev)});

      Renderer renderer(rc, written, nb_written ? &*nb_written : nullptr);
      char stem_buf[48];
      std::snprintf(stem_buf, sizeof stem_buf, "c%03d-h%d-r%d", cyl, head, rev);
      const std::string stem = stem_buf;
      auto writer = open_capture_writer(container, sample_format, out / "captures", stem, renderer.total_samples(), fs_hz);
      for (;;) {
        const Progress p = renderer.process(chunk);
        if (p.produced == 0) break;
        writer->write(std::span<const float>(chunk.data(), p.produced));
      }

      // ---- damage truth for this capture ------------------------------------------------
      std::vector<DamageSpan> spans;
      for (const auto& d : dropouts)
        add_wrapped(spans, {"scratch", d.start_bit, d.length_bits, {{"depth", d.depth}}}, L);
      for (const auto& d : defects)
        add_wrapped(spans, {"defect", d.start_bit, d.length_bits, {{"noise_rms", d.noise_rms}}}, L);
      for (const auto& a : rc.asperities) {
        // Affected while the pop exceeds 5 % of A (common practice, no source).
        const double len = a.rise_bits + (std::abs(a.amplitude) > 0.05 ? a.decay_bits * std::log(std::abs(a.amplitude) / 0.05) : 0.0);
        add_wrapped(spans, {"thermal_asperity", a.position_bit, std::max(len, 1.0), {{"amplitude", a.amplitude}}}, L);
      }
      for (const DamageSpan& d : spans) {
        for (const auto& sp : layout.sectors) {
          const double a = std::max(d.a, static_cast<double>(sp.preamble_bit));
          const double b = std::min(d.b, static_cast<double>(sp.end_bit));
          if (a >= b) continue;
          json e = {{"lba", fmt.lba(cyl, head, sp.sector)}, {"cylinder", cyl}, {"head", head}, {"sector", sp.sector},
                    {"revolution", rev}, {"kind", d.kind},
                    {"bit_span", {static_cast<uint64_t>(std::floor(a)), static_cast<uint64_t>(std::ceil(b))}},
                    {"capture", "captures/" + capture_file_name(stem, container)}};
          for (auto& [k, v] : d.detail.items()) e[k] = v;
          damage_sectors.push_back(e);
        }
      }

      // ---- sidecar ------------------------------------------------------------------------
      CaptureMeta meta;
      meta.sample_rate_hz = fs_hz;
      meta.bit_rate_hz = f0 / (1.0 - rc.spindle.offset);
      meta.format = fmt.name;
      meta.cylinder = cyl;
      meta.head = head;
      meta.revolution = rev;
      // Samples are stored normalised to digital full scale, and the loader does not rescale
      // (core/load/README.md): a full-scale sample loads as 1.0. The analog amplitude at full
      // scale (in units of A) is synth.capture.full_scale.
      meta.full_scale = 1.0;
      meta.rig = {{"recorder", "salvor-synth " + version_string()},
                  {"samples", renderer.total_samples()},
                  {"index_sample", renderer.index_sample()},
                  {"clipped_samples", renderer.clipped_samples()}};
      json sy = scenario_params;
      sy["seed"] = seed;
      sy["container"] = to_string(container);
      sy["sample_format"] = to_string(sample_format);
      sy["revolutions"] = revolutions;
      sy["nominal_bit_rate_hz"] = f0;
      sy["samples_per_bit"] = spb;
      sy["bits_per_track"] = fmt.bits_per_track;
      sy["lead_bits"] = sc.lead_bits;
      sy["tail_bits"] = sc.tail_bits;
      sy["conventions"] = {
          {"transition", "channel bit n (NRZI 1) is a transition at bit position n from the index; the written level "
                         "before bit 0 is the format's initial_level (" + std::to_string(fmt.initial_level) + ")"},
          {"time", "local bit period T0 (1 - eps(x)), eps(x) = offset + drift sin(2 pi x / period + phase)"},
          {"snr", "20 log10(A / sigma_n), sigma_n = rms electronic noise in |f| < 1/(2T), A = isolated-transition peak"},
          {"amplitude_units", "isolated-transition peak A = 1 before the weak-head factor"}};
      sy["this_capture"] = {
          {"amplitude", rc.amplitude},
          {"snr_db", rc.noise.snr_db ? json(*rc.noise.snr_db) : json(nullptr)},
          {"electronic_sigma_per_sample", renderer.electronic_sigma_per_sample()},
          {"speed_offset_ppm", rev_ppm},
          {"drift_ppm", sc.spindle.drift_ppm},
          {"drift_period_bits", rc.spindle.drift_period_bits},
          {"drift_phase_rad", rc.spindle.drift_phase},
          {"sampling_phase", rc.sampling_phase},
          {"lowpass_group_delay_bits", renderer.lowpass_group_delay_bits()},
          {"splice_transition", written.has_splice},
          {"offtrack_neighbour_cylinder", offtrack ? json(nb_cyl) : json(nullptr)},
          {"offtrack_fraction", rc.offtrack_fraction},
          {"truncation_peak_fraction", sc.model == PulseModel::lorentzian
                                           ? lorentzian_truncation_peak_fraction(sc.span_widths)
                                           : erf_truncation_peak_fraction(sc.span_widths)},
          {"media_seed", derive_seed(seed, {static_cast<uint64_t>(StreamKind::media_noise), uint64_t(cyl), uint64_t(head)})},
          {"noise_seed", rc.noise_seed}};
      json dmg = json::array();
      for (const DamageSpan& d : spans) {
        json e = {{"kind", d.kind}, {"bit_span", {d.a, d.b}}};
        for (auto& [k, v] : d.detail.items()) e[k] = v;
        dmg.push_back(e);
      }
      sy["this_capture"]["damage"] = dmg;
      meta.synth = sy;
      writer->finish(meta);
      std::error_code sz_ec;
      const auto size = fs::file_size(writer->data_path(), sz_ec);
      summary.bytes += sz_ec ? 0 : size;
      summary.samples += renderer.total_samples();
      ++summary.captures;
      manifest_captures.push_back({{"path", "captures/" + capture_file_name(stem, container)},
                                   {"sidecar", "captures/" + sidecar_file_name(stem, container)},
                                   {"cylinder", cyl},
                                   {"head", head},
                                   {"revolution", rev}});
      if (opt.progress) {
        std::ostringstream o;
        o << stem << ": " << renderer.total_samples() << " samples, " << spans.size() << " damaged span(s)";
        opt.progress(o.str());
      }
    }
  }

  // ---- truth and manifest ---------------------------------------------------------------
  json conditions = json::array();
  for (const auto& w : sc.weak_heads)
    conditions.push_back({{"kind", "weak_head"}, {"head", w.head}, {"snr_loss_db", w.snr_loss_db},
                          {"amplitude_factor", w.amplitude_factor}});
  if (sc.offtrack.fraction > 0)
    conditions.push_back({{"kind", "offtrack"}, {"fraction", sc.offtrack.fraction}, {"side", sc.offtrack.side},
                          {"heads", sc.offtrack.heads}});
  if (sc.spindle.offset_ppm != 0 || sc.spindle.drift_ppm != 0 || sc.spindle.revolution_sigma_ppm != 0)
    conditions.push_back({{"kind", "spindle"}, {"offset_ppm", sc.spindle.offset_ppm},
                          {"revolution_sigma_ppm", sc.spindle.revolution_sigma_ppm},
                          {"drift_ppm", sc.spindle.drift_ppm}});
  json damage = {{"salvor_damage", 1},
                 {"scenario", sc.name},
                 {"seed", seed},
                 {"format", fmt.name},
                 {"note", "bit_span is [first, one past last) channel bit of the sector overlapped, from the index"},
                 {"sectors", damage_sectors},
                 {"conditions", conditions}};
  write_file_atomic(out / "truth" / "damage.json", damage.dump(2) + "\n");
  if (opt.bitstreams) {
    json idx = {{"salvor_bits", 1},
                {"format", fmt.name},
                {"bits_per_track", fmt.bits_per_track},
                {"packing", "msb_first: bit n of the track is bit (7 - n % 8) of byte n / 8; zero padding"},
                {"domain", "channel bits, NRZI: 1 = a transition"},
                {"initial_level", fmt.initial_level},
                {"files", bits_files}};
    write_file_atomic(out / "truth" / "bits" / "index.json", idx.dump(2) + "\n");
  }
  json truth = {{"image", "truth/image.bin"},
                {"image_sha256", sha256_file_hex(out / "truth" / "image.bin")},
                {"damage", "truth/damage.json"}};
  if (opt.bitstreams) truth["bitstreams"] = "truth/bits";
  json manifest = {{"salvor_manifest", 1},
                   {"name", sc.name},
                   {"format", fmt.name},
                   {"format_file", "format.toml"},
                   {"scenario", sc.name},
                   {"seed", seed},
                   {"generator", "salvor-synth " + version_string()},
                   {"description", sc.description},
                   {"captures", manifest_captures},
                   {"truth", truth}};
  write_file_atomic(out / "manifest.json", manifest.dump(2) + "\n");
  summary.damaged_sector_entries = damage_sectors.size();
  summary.manifest = out / "manifest.json";
  return summary;
}

}  // namespace salvor::synth
