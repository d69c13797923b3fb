// open_capture(): container detection, sidecar and SigMF metadata, the precedence of
// options > sidecar > container, and the checks shared by every container.
//
// SigMF: Signal Metadata Format specification v1.0.0 (sigmf/SigMF on GitHub, CC-BY-SA):
// global core:datatype, core:sample_rate, core:num_channels, core:trailing_bytes,
// core:dataset; captures[0] core:sample_start and core:header_bytes.

#include "load/capture_reader.hpp"

#include <algorithm>
#include <array>
#include <cmath>
#include <cstring>

#include "common/error.hpp"
#include "load/load_detail.hpp"

namespace salvor::load {

using detail::ContainerFacts;
using detail::format_hz;
using detail::InputFile;
using detail::SidecarFields;

// ---- names ----------------------------------------------------------------------------

std::string_view container_name(Container c) {
  switch (c) {
    case Container::automatic: return "auto";
    case Container::sndfile: return "sndfile";
    case Container::raw: return "raw";
    case Container::zstd_raw: return "zstd";
    case Container::sigmf: return "sigmf";
    case Container::csv: return "csv";
  }
  return "auto";
}

Container parse_container(std::string_view name) {
  for (Container c : {Container::automatic, Container::sndfile, Container::raw, Container::zstd_raw,
                      Container::sigmf, Container::csv})
    if (container_name(c) == name) return c;
  throw_usage("container", "\"" + std::string(name) + "\" is not one of auto, sndfile, raw, zstd, sigmf, csv");
}

// ---- detection ------------------------------------------------------------------------

namespace {

std::string lower_extension(const std::filesystem::path& p) {
  std::string e = p.extension().string();
  for (char& c : e) c = static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
  return e;
}

bool starts_with(const std::vector<std::byte>& b, std::initializer_list<unsigned> magic) {
  if (b.size() < magic.size()) return false;
  size_t i = 0;
  for (unsigned m : magic)
    if (std::to_integer<unsigned>(b[i++]) != m) return false;
  return true;
}

std::optional<Container> container_from_magic(const std::vector<std::byte>& b) {
  // RIFF/RIFX (WAV), RF64 (EBU Tech 3306), FORM (AIFF, EA IFF 85), fLaC (FLAC stream marker).
  for (const char* tag : {"RIFF", "RIFX", "RF64", "FORM", "fLaC"})
    if (b.size() >= 4 && std::memcmp(b.data(), tag, 4) == 0) return Container::sndfile;
  // Sony Wave64: the "riff" chunk GUID 66666972-912E-11CF-A5D6-28DB04C10000.
  if (starts_with(b, {0x72, 0x69, 0x66, 0x66, 0x2E, 0x91, 0xCF, 0x11, 0xA5, 0xD6, 0x28, 0xDB, 0x04, 0xC1, 0x00, 0x00}))
    return Container::sndfile;
  // zstd frame magic 0xFD2FB528 and skippable frames 0x184D2A50..5F, little-endian (RFC 8878 §3.1).
  if (starts_with(b, {0x28, 0xB5, 0x2F, 0xFD})) return Container::zstd_raw;
  if (b.size() >= 4 && (std::to_integer<unsigned>(b[0]) & 0xF0) == 0x50 && std::to_integer<unsigned>(b[1]) == 0x2A &&
      std::to_integer<unsigned>(b[2]) == 0x4D && std::to_integer<unsigned>(b[3]) == 0x18)
    return Container::zstd_raw;
  return std::nullopt;
}

std::optional<Container> container_from_name(const std::filesystem::path& p) {
  const std::string e = lower_extension(p);
  if (e == ".sigmf-meta" || e == ".sigmf-data") return Container::sigmf;
  if (e == ".csv") return Container::csv;
  if (e == ".zst" || e == ".zstd") return Container::zstd_raw;
  for (const char* raw : {".raw", ".bin", ".pcm", ".i8", ".u8", ".i16", ".i32", ".f32", ".f64"})
    if (e == raw) return Container::raw;
  for (const char* snd : {".wav", ".wave", ".w64", ".rf64", ".flac", ".aif", ".aiff", ".aifc"})
    if (e == snd) return Container::sndfile;
  return std::nullopt;
}

// A sample encoding implied by the name (".i16", or ".i16.zst"); lowest precedence.
std::optional<SampleEncoding> encoding_from_name(const std::filesystem::path& p) {
  std::filesystem::path q = p;
  std::string e = lower_extension(q);
  if (e == ".zst" || e == ".zstd") e = lower_extension(q.stem());
  if (e == ".i8") return SampleEncoding::int8;
  if (e == ".u8") return SampleEncoding::uint8;
  if (e == ".i16") return SampleEncoding::int16_le;
  if (e == ".i32") return SampleEncoding::int32_le;
  if (e == ".f32") return SampleEncoding::float32_le;
  if (e == ".f64") return SampleEncoding::float64_le;
  return std::nullopt;
}

}  // namespace

std::optional<Container> detect_container(const std::filesystem::path& path) {
  InputFile file(path);
  if (auto c = container_from_magic(detail::read_prefix(file, 16))) return c;
  return container_from_name(path);
}

// ---- the reader -----------------------------------------------------------------------

CaptureReader::CaptureReader(CaptureInfo info, std::unique_ptr<detail::SampleSource> source)
    : info_(std::move(info)), source_(std::move(source)) {}
CaptureReader::CaptureReader(CaptureReader&&) noexcept = default;
CaptureReader& CaptureReader::operator=(CaptureReader&&) noexcept = default;
CaptureReader::~CaptureReader() = default;

size_t CaptureReader::read(std::span<float> out) {
  if (out.empty()) return 0;
  size_t n = source_->read(out);
  for (size_t i = 0; i < n; ++i) {
    if (!std::isfinite(out[i]))
      throw_input(info_.data_path.string(),
                  std::string("sample ") + std::to_string(position_ + i) + " of channel " +
                      std::to_string(info_.channel) + " is " + (std::isnan(out[i]) ? "NaN" : "infinite") +
                      "; a capture must hold finite values");
  }
  if (n == 0 && position_ == 0) throw_input(info_.data_path.string(), "contains no samples");
  position_ += n;
  if (info_.total_samples && n < out.size() && position_ != *info_.total_samples)
    throw_input(info_.data_path.string(), "ended after " + std::to_string(position_) + " samples, expected " +
                                              std::to_string(*info_.total_samples));
  return n;
}

void CaptureReader::rewind() {
  source_->rewind();
  position_ = 0;
}

std::string CaptureReader::describe() const {
  std::string s = info_.path.string() + ": " + std::string(container_name(info_.container)) + " (" +
                  info_.container_detail + "), " + format_hz(info_.sample_rate_hz) + " from " +
                  info_.sample_rate_source + ", channel " + std::to_string(info_.channel) + " of " +
                  std::to_string(info_.channels);
  if (info_.total_samples) s += ", " + std::to_string(*info_.total_samples) + " samples";
  if (!info_.format.empty()) s += ", format " + info_.format;
  if (info_.cylinder && info_.head)
    s += ", cylinder " + std::to_string(*info_.cylinder) + " head " + std::to_string(*info_.head);
  if (info_.revolution) s += " revolution " + std::to_string(*info_.revolution);
  return s;
}

// ---- open_capture ---------------------------------------------------------------------

namespace {

void check_options(const LoadOptions& o) {
  auto positive = [](std::optional<double> v, const char* name) {
    if (v && !(std::isfinite(*v) && *v > 0))
      throw_usage(name, "must be a positive finite number, got " + std::to_string(*v));
  };
  if (o.sample_rate_hz) {
    double r = *o.sample_rate_hz;
    if (!(r >= kMinSampleRateHz && r <= kMaxSampleRateHz))
      throw_usage("sample_rate_hz", "sample rate " + format_hz(r) + " is outside the accepted range " +
                                        format_hz(kMinSampleRateHz) + " to " + format_hz(kMaxSampleRateHz));
  }
  positive(o.bit_rate_hz, "bit_rate_hz");
  positive(o.full_scale, "full_scale");
  if (o.channel && *o.channel < 0) throw_usage("channel", "must be 0 or more, got " + std::to_string(*o.channel));
  if (o.chunk_samples < 1 || o.chunk_samples > (1u << 24))
    throw_usage("chunk_samples", "must be between 1 and 16777216, got " + std::to_string(o.chunk_samples));
  if (!(std::isfinite(o.csv_step_tolerance) && o.csv_step_tolerance > 0 && o.csv_step_tolerance < 1))
    throw_usage("csv_step_tolerance", "must be between 0 and 1 (relative), got " + std::to_string(o.csv_step_tolerance));
  if (o.csv_value_column < 0) throw_usage("csv_value_column", "must be 0 or more");
  if (o.csv_time_column < -1) throw_usage("csv_time_column", "must be -1 (none) or a column index");
  if (o.csv_time_column == o.csv_value_column) throw_usage("csv_time_column", "must differ from csv_value_column");
}

void check_rate_range(double r, const std::string& where, const std::string& origin) {
  if (!(r >= kMinSampleRateHz && r <= kMaxSampleRateHz))
    throw_input(where, origin + " sample rate " + format_hz(r) + " is outside the accepted range " +
                           format_hz(kMinSampleRateHz) + " to " + format_hz(kMaxSampleRateHz));
}

// Chooses the rate: options > sidecar > container, refusing contradictions.
void resolve_rate(CaptureInfo& info, const LoadOptions& o, const std::optional<SidecarFields>& side,
                  const ContainerFacts& facts, double csv_tolerance) {
  const std::string where = info.path.string();
  if (o.sample_rate_hz) {
    info.sample_rate_hz = *o.sample_rate_hz;
    info.sample_rate_source = "option";
    return;
  }
  const bool sigmf = info.container == Container::sigmf;
  if (side && side->sample_rate_hz) {
    double s = *side->sample_rate_hz;
    check_rate_range(s, side->path.string(), sigmf ? "SigMF core:sample_rate" : "sidecar");
    if (facts.sample_rate_hz) {
      double c = *facts.sample_rate_hz;
      bool contradicts = false;
      if (facts.rate_is_measured) {
        contradicts = std::fabs(s - c) > csv_tolerance * c;
      } else {
        // The header could have stored the sidecar's rate exactly, so it should agree.
        bool representable = s == std::floor(s) && s <= facts.max_exact_rate_hz;
        contradicts = representable && s != c;
      }
      if (contradicts)
        throw_input(where, "sidecar " + side->path.filename().string() + " says " + format_hz(s) +
                               (facts.rate_is_measured ? ", the time column gives " : ", file header says ") +
                               format_hz(c));
    }
    info.sample_rate_hz = s;
    info.sample_rate_source = sigmf ? "sigmf" : "sidecar";
    return;
  }
  if (facts.sample_rate_hz) {
    check_rate_range(*facts.sample_rate_hz, where, facts.rate_is_measured ? "time column" : "file header");
    info.sample_rate_hz = *facts.sample_rate_hz;
    info.sample_rate_source = facts.rate_is_measured ? "csv time column" : "container";
    return;
  }
  throw_input(where, std::string("no sample rate: this ") + std::string(container_name(info.container)) +
                         " capture does not store one; give it as an option or in a sidecar");
}

SampleEncoding resolve_encoding(const std::filesystem::path& path, const LoadOptions& o,
                                const std::optional<SidecarFields>& side) {
  if (o.sample_encoding) return *o.sample_encoding;
  if (side && side->sample_encoding) return *side->sample_encoding;
  if (auto e = encoding_from_name(path)) return *e;
  throw_input(path.string(), "headerless capture without a sample encoding: give one as an option or as "
                             "sample_encoding in a sidecar (int8, uint8, int16_le, int16_be, int32_le, "
                             "int32_be, float32_le, float64_le)");
}

std::string frames_text(SampleEncoding e, int channels) {
  std::string enc(encoding_name(e));
  return channels == 1 ? enc + " samples" : "frames of " + std::to_string(channels) + " " + enc + " samples";
}

// Layout of a raw data file: [header][whole frames][trailing bytes].
detail::EncodedLayout raw_layout(const InputFile& file, SampleEncoding enc, int channels, uint64_t header,
                                 uint64_t trailing, std::optional<uint64_t>& total) {
  detail::EncodedLayout l;
  l.encoding = enc;
  l.channels = channels;
  const uint64_t frame = encoding_bytes(enc) * static_cast<uint64_t>(channels);
  if (header > file.size() || trailing > file.size() - header)  // written so it cannot overflow
    throw_input(file.name(), "file is " + std::to_string(file.size()) + " bytes, shorter than its header (" +
                                 std::to_string(header) + " bytes)" +
                                 (trailing ? " and trailing bytes (" + std::to_string(trailing) + ")" : ""));
  const uint64_t body = file.size() - header - trailing;
  if (body % frame != 0)
    throw_input(file.name(), "length " + std::to_string(body) + " bytes" +
                                 (header ? " after a header of " + std::to_string(header) + " bytes" : "") +
                                 " is not a whole number of " + frames_text(enc, channels));
  if (body == 0) throw_input(file.name(), "contains no samples");
  l.start_byte = header;
  l.end_byte = header + body;
  total = body / frame;
  return l;
}

struct SigmfMeta {
  std::filesystem::path meta_path, data_path;
  SidecarFields fields;
  SampleEncoding encoding = SampleEncoding::int16_le;
  int channels = 1;
  uint64_t sample_start = 0, header_bytes = 0, trailing_bytes = 0;
};

SigmfMeta read_sigmf(const std::filesystem::path& path) {
  SigmfMeta m;
  m.meta_path = path;
  m.meta_path.replace_extension(".sigmf-meta");
  m.data_path = path;
  m.data_path.replace_extension(".sigmf-data");
  InputFile meta_file(m.meta_path);
  const std::string where = meta_file.name();
  nlohmann::json j;
  try {
    j = nlohmann::json::parse(detail::read_small_file(meta_file, 64u << 20));
  } catch (const nlohmann::json::parse_error& e) {
    throw_input(where, std::string("SigMF metadata is not valid JSON: ") + e.what());
  }
  if (!j.is_object() || !j.contains("global") || !j["global"].is_object())
    throw_input(where, "SigMF metadata needs a \"global\" object");
  const auto& g = j["global"];
  auto datatype = detail::json_string(g, "core:datatype", where);
  if (!datatype) throw_input(where, "SigMF global has no core:datatype");
  auto enc = parse_sigmf_datatype(*datatype);
  if (!enc) {
    bool complex = !datatype->empty() && (*datatype)[0] == 'c';
    throw_input(where, "SigMF core:datatype \"" + *datatype + "\" is not supported" +
                           (complex ? " (complex samples; a readback capture is real)" : "") +
                           "; salvor reads ri8, ru8, ri16_le, ri16_be, ri32_le, ri32_be, rf32_le, rf64_le");
  }
  m.encoding = *enc;
  if (auto n = detail::json_non_negative_integer(g, "core:num_channels", where)) {
    if (*n < 1 || *n > 65535) throw_input(where, "SigMF core:num_channels " + std::to_string(*n) + " is out of range");
    m.channels = static_cast<int>(*n);
  }
  m.trailing_bytes = static_cast<uint64_t>(detail::json_non_negative_integer(g, "core:trailing_bytes", where).value_or(0));
  if (auto dataset = detail::json_string(g, "core:dataset", where))
    m.data_path = m.meta_path.parent_path() / *dataset;
  if (j.contains("captures")) {
    const auto& caps = j["captures"];
    if (!caps.is_array()) throw_input(where, "SigMF captures must be an array");
    if (!caps.empty()) {
      if (!caps[0].is_object()) throw_input(where, "SigMF captures[0] must be an object");
      m.sample_start = static_cast<uint64_t>(detail::json_non_negative_integer(caps[0], "core:sample_start", where).value_or(0));
      m.header_bytes = static_cast<uint64_t>(detail::json_non_negative_integer(caps[0], "core:header_bytes", where).value_or(0));
    }
  }
  // salvor's fields in the global object, same meaning as in a sidecar.
  auto& f = m.fields;
  f.path = m.meta_path;
  f.sample_rate_hz = detail::json_number(g, "core:sample_rate", where);
  f.bit_rate_hz = detail::json_positive_number(g, "salvor:bit_rate_hz", where);
  f.full_scale = detail::json_positive_number(g, "salvor:full_scale", where);
  f.format = detail::json_string(g, "salvor:format", where);
  auto small = [&](const char* key) -> std::optional<int> {
    auto v = detail::json_non_negative_integer(g, key, where);
    if (v && *v > 1 << 30) throw_input(where, std::string("field ") + key + " is too large");
    return v ? std::optional<int>(static_cast<int>(*v)) : std::nullopt;
  };
  f.cylinder = small("salvor:cylinder");
  f.head = small("salvor:head");
  f.revolution = small("salvor:revolution");
  f.channel = small("salvor:channel");
  f.json = std::move(j);
  return m;
}

}  // namespace

CaptureReader open_capture(const std::filesystem::path& path, const LoadOptions& o) {
  check_options(o);
  const std::string where = path.string();

  Container container = o.container;
  if (container == Container::automatic) {
    auto c = detect_container(path);  // also refuses missing, empty, unreadable files
    if (!c)
      throw_input(where, "cannot tell the container from the first bytes or the file name; name it "
                         "(auto, sndfile, raw, zstd, sigmf, csv) in the load options");
    container = *c;
  } else if (container != Container::sigmf) {
    InputFile check(path);  // same checks as detection
  }

  CaptureInfo info;
  info.path = path;
  info.container = container;

  // Sidecar: SigMF carries its own; every other container may have "<name>.json".
  std::optional<SidecarFields> side;
  std::optional<SigmfMeta> sigmf;
  if (container == Container::sigmf) {
    sigmf = read_sigmf(path);
    side = sigmf->fields;
  } else if (o.use_sidecar) {
    std::filesystem::path sp = o.sidecar_path;
    bool explicit_path = !sp.empty();
    if (!explicit_path) sp = std::filesystem::path(path.string() + ".json");
    std::error_code ec;
    if (explicit_path || std::filesystem::exists(sp, ec)) side = detail::read_sidecar(sp);
  }
  if (side) {
    info.sidecar_path = side->path;
    info.sidecar = side->json;
  }

  if (o.header_bytes && (container == Container::sndfile || container == Container::csv))
    throw_usage("header_bytes", "a header offset applies to raw, zstd and SigMF captures, not to " +
                                    std::string(container_name(container)) + " (" + where + ")");
  if (o.sample_encoding && container != Container::raw && container != Container::zstd_raw)
    throw_usage("sample_encoding", "a sample encoding applies to raw and zstd captures only; " + where +
                                       " is " + std::string(container_name(container)));

  // What the container itself says.
  ContainerFacts facts;
  std::optional<detail::EncodedLayout> layout;
  std::unique_ptr<InputFile> data_file;
  detail::SndfileOpened snd;
  detail::CsvLayout csv{o.csv_time_column, o.csv_value_column, o.csv_step_tolerance};
  switch (container) {
    case Container::sndfile:
      snd = detail::open_sndfile(path);
      facts = snd.facts;
      break;
    case Container::raw:
    case Container::zstd_raw: {
      SampleEncoding enc = resolve_encoding(path, o, side);
      data_file = std::make_unique<InputFile>(path);
      facts.data_path = path;
      facts.sample_encoding = std::string(encoding_name(enc));
      if (container == Container::raw) {
        layout = raw_layout(*data_file, enc, 1, o.header_bytes.value_or(0), 0, facts.total_samples);
        facts.detail = "raw " + facts.sample_encoding;
      } else {
        layout = detail::EncodedLayout{enc, 1, 0, o.header_bytes.value_or(0), 0};
        facts.detail = "zstd raw " + facts.sample_encoding;
      }
      break;
    }
    case Container::sigmf: {
      data_file = std::make_unique<InputFile>(sigmf->data_path);
      const uint64_t frame = encoding_bytes(sigmf->encoding) * static_cast<uint64_t>(sigmf->channels);
      uint64_t header = o.header_bytes.value_or(sigmf->header_bytes);
      layout = raw_layout(*data_file, sigmf->encoding, sigmf->channels, header, sigmf->trailing_bytes,
                          facts.total_samples);
      if (sigmf->sample_start > 0) {
        if (sigmf->sample_start >= *facts.total_samples)
          throw_input(sigmf->meta_path.string(), "captures[0] core:sample_start " + std::to_string(sigmf->sample_start) +
                                                     " is beyond the " + std::to_string(*facts.total_samples) +
                                                     " samples of the data file");
        layout->start_byte += sigmf->sample_start * frame;
        *facts.total_samples -= sigmf->sample_start;
      }
      facts.data_path = sigmf->data_path;
      facts.channels = sigmf->channels;
      facts.sample_encoding = std::string(encoding_name(sigmf->encoding));
      facts.detail = "SigMF " + facts.sample_encoding;
      break;
    }
    case Container::csv:
      facts = detail::scan_csv(path, csv);
      break;
    case Container::automatic:
      throw_internal("container left undecided");
  }
  info.data_path = facts.data_path;
  info.container_detail = facts.detail;
  info.sample_encoding = facts.sample_encoding;
  info.channels = facts.channels;
  info.total_samples = facts.total_samples;

  // Channel: options > sidecar > 0.
  if (o.channel) {
    if (*o.channel >= info.channels)
      throw_usage("channel", where + ": channel " + std::to_string(*o.channel) + " requested, but the file has " +
                                 std::to_string(info.channels) + " channel" + (info.channels == 1 ? "" : "s") +
                                 " (0 to " + std::to_string(info.channels - 1) + ")");
    info.channel = *o.channel;
  } else if (side && side->channel) {
    if (*side->channel >= info.channels)
      throw_input(where, "sidecar " + side->path.filename().string() + " names channel " +
                             std::to_string(*side->channel) + ", but the file has " + std::to_string(info.channels) +
                             " channel" + (info.channels == 1 ? "" : "s"));
    info.channel = *side->channel;
  }

  resolve_rate(info, o, side, facts, o.csv_step_tolerance);

  info.full_scale = o.full_scale ? *o.full_scale : (side && side->full_scale ? *side->full_scale : 1.0);
  info.bit_rate_hz = o.bit_rate_hz ? o.bit_rate_hz : (side ? side->bit_rate_hz : std::nullopt);
  info.format = o.format ? *o.format : (side && side->format ? *side->format : std::string());
  if (side) {
    info.cylinder = side->cylinder;
    info.head = side->head;
    info.revolution = side->revolution;
  }

  std::unique_ptr<detail::SampleSource> source;
  switch (container) {
    case Container::sndfile:
      source = detail::make_sndfile_source(snd.handle, info.channel, o.chunk_samples);
      break;
    case Container::raw:
    case Container::sigmf:
      layout->channel = info.channel;
      source = detail::make_raw_source(std::move(data_file), *layout, o.chunk_samples);
      break;
    case Container::zstd_raw:
      layout->channel = info.channel;
      source = detail::make_zstd_source(std::move(data_file), *layout, o.chunk_samples);
      break;
    case Container::csv:
      source = detail::make_csv_source(path, csv);
      break;
    case Container::automatic:
      break;
  }
  return CaptureReader(std::move(info), std::move(source));
}

}  // namespace salvor::load
