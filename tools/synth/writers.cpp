#include "synth/writers.hpp"

#include <cmath>
#include <cstring>
#include <limits>
#include <vector>

#include <sndfile.h>
#include <zstd.h>

#include "common/atomic_file.hpp"
#include "common/error.hpp"

namespace salvor::synth {

namespace fs = std::filesystem;

std::string to_string(Container c) {
  switch (c) {
    case Container::wav: return "wav";
    case Container::rf64: return "rf64";
    case Container::w64: return "w64";
    case Container::flac: return "flac";
    case Container::sigmf: return "sigmf";
    case Container::zstd: return "zstd";
  }
  return "?";
}

Container container_from_string(const std::string& s, const std::string& where) {
  for (Container c : {Container::wav, Container::rf64, Container::w64, Container::flac, Container::sigmf,
                      Container::zstd})
    if (s == to_string(c)) return c;
  throw_usage(where, "unknown container '" + s + "' (expected wav, rf64, w64, flac, sigmf or zstd)");
}

std::string capture_file_name(const std::string& stem, Container c) {
  switch (c) {
    case Container::sigmf: return stem + ".sigmf-data";
    case Container::zstd: return stem + ".raw.zst";
    default: return stem + "." + to_string(c);
  }
}

std::string sidecar_file_name(const std::string& stem, Container c) {
  if (c == Container::sigmf) return stem + ".sigmf-meta";
  return capture_file_name(stem, c) + ".json";
}

std::string sample_encoding_name(SampleFormat f) {
  switch (f) {
    case SampleFormat::int8: return "int8";
    case SampleFormat::int16: return "int16_le";
    case SampleFormat::float32: return "float32_le";
  }
  return "?";
}

static std::string sigmf_datatype(SampleFormat f) {
  switch (f) {
    case SampleFormat::int8: return "ri8";
    case SampleFormat::int16: return "ri16_le";
    case SampleFormat::float32: return "rf32_le";
  }
  return "?";
}

// 4 GiB: the largest RIFF/WAV file, minus room for the header and libsndfile's chunks.
static constexpr uint64_t kWavLimitBytes = 0xFFFFFFFFull - 65536;

void check_container(Container c, SampleFormat f, uint64_t frames, const std::string& where) {
  if (f == SampleFormat::int8 && (c == Container::wav || c == Container::rf64 || c == Container::w64))
    throw_usage(where, to_string(c) + " has no signed 8-bit samples (only unsigned); use flac, sigmf or zstd for int8");
  if (f == SampleFormat::float32 && c == Container::flac)
    throw_usage(where, "flac holds integer samples only; use int8 or int16, or another container for float32");
  const uint64_t bytes = frames * static_cast<uint64_t>(bytes_per_sample(f));
  if (c == Container::wav && bytes > kWavLimitBytes)
    throw_usage(where, "capture of " + std::to_string(bytes) +
                           " bytes exceeds the 4 GiB limit of wav (it would read back truncated); use rf64, w64, sigmf or zstd");
}

double container_sample_rate(Container c, double fs) {
  const double limit = c == Container::flac ? 655350.0 : static_cast<double>(std::numeric_limits<int>::max());
  double r = fs;
  while (r > limit) r /= 10.0;
  return std::round(r);
}

nlohmann::json sidecar_json(const CaptureMeta& m, Container c, SampleFormat f) {
  nlohmann::json j;
  j["salvor_sidecar"] = 1;
  j["sample_rate_hz"] = m.sample_rate_hz;
  j["bit_rate_hz"] = m.bit_rate_hz;
  j["format"] = m.format;
  j["cylinder"] = m.cylinder;
  j["head"] = m.head;
  j["revolution"] = m.revolution;
  j["channel"] = 0;
  if (c == Container::zstd || c == Container::sigmf) j["sample_encoding"] = sample_encoding_name(f);
  j["full_scale"] = m.full_scale;
  j["rig"] = m.rig;
  j["synth"] = m.synth;
  return j;
}

nlohmann::json sigmf_meta_json(const CaptureMeta& m, SampleFormat f) {
  nlohmann::json g;
  g["core:datatype"] = sigmf_datatype(f);
  g["core:sample_rate"] = m.sample_rate_hz;
  g["core:version"] = "1.0.0";
  g["core:recorder"] = "salvor-synth";
  g["core:description"] = "simulated readback, cylinder " + std::to_string(m.cylinder) + " head " +
                          std::to_string(m.head) + " revolution " + std::to_string(m.revolution);
  g["core:extensions"] = nlohmann::json::array({{{"name", "salvor"}, {"version", "1.0.0"}, {"optional", true}}});
  g["salvor:bit_rate_hz"] = m.bit_rate_hz;
  g["salvor:format"] = m.format;
  g["salvor:cylinder"] = m.cylinder;
  g["salvor:head"] = m.head;
  g["salvor:revolution"] = m.revolution;
  g["salvor:full_scale"] = m.full_scale;
  g["salvor:rig"] = m.rig;
  g["salvor:synth"] = m.synth;
  nlohmann::json j;
  j["global"] = g;
  j["captures"] = nlohmann::json::array({{{"core:sample_start", 0}}});
  j["annotations"] = nlohmann::json::array();
  return j;
}

namespace {

// Little-endian bytes of grid samples.
void encode_le(std::span<const float> s, SampleFormat f, std::vector<unsigned char>& out) {
  out.resize(s.size() * static_cast<size_t>(bytes_per_sample(f)));
  unsigned char* p = out.data();
  for (float v : s) {
    if (f == SampleFormat::int8) {
      *p++ = static_cast<unsigned char>(static_cast<int8_t>(code_of(v, f)));
    } else if (f == SampleFormat::int16) {
      const uint16_t c = static_cast<uint16_t>(static_cast<int16_t>(code_of(v, f)));
      *p++ = static_cast<unsigned char>(c & 0xFF);
      *p++ = static_cast<unsigned char>(c >> 8);
    } else {
      uint32_t u;
      std::memcpy(&u, &v, 4);
      for (int b = 0; b < 4; ++b) *p++ = static_cast<unsigned char>((u >> (8 * b)) & 0xFF);
    }
  }
}

class SndfileWriter final : public CaptureWriter {
 public:
  SndfileWriter(Container c, SampleFormat f, const fs::path& folder, const std::string& stem, uint64_t frames,
                double fs)
      : c_(c), f_(f), frames_expected_(frames) {
    data_path_ = folder / capture_file_name(stem, c);
    meta_path_ = folder / sidecar_file_name(stem, c);
    temp_ = temp_path_for(data_path_);
    SF_INFO info{};
    info.samplerate = static_cast<int>(container_sample_rate(c, fs));
    info.channels = 1;
    const int major = c == Container::wav ? SF_FORMAT_WAV
                      : c == Container::rf64 ? SF_FORMAT_RF64
                      : c == Container::w64 ? SF_FORMAT_W64
                                            : SF_FORMAT_FLAC;
    const int minor = f == SampleFormat::int8 ? SF_FORMAT_PCM_S8
                      : f == SampleFormat::int16 ? SF_FORMAT_PCM_16
                                                 : SF_FORMAT_FLOAT;
    info.format = major | minor;
    if (!sf_format_check(&info))
      throw_usage(data_path_.string(), "libsndfile cannot write " + to_string(f) + " samples in " + to_string(c));
    file_ = sf_open(temp_.c_str(), SFM_WRITE, &info);
    if (!file_) throw_output(data_path_.string(), std::string("cannot create: ") + sf_strerror(nullptr));
  }
  ~SndfileWriter() override {
    if (file_) {
      sf_close(file_);
      std::error_code ec;
      fs::remove(temp_, ec);
    }
  }
  void write(std::span<const float> s) override {
    if (!file_) throw_internal("capture writer used after finish");
    frames_ += s.size();
    if (frames_ > frames_expected_) throw_internal("more samples than announced for " + data_path_.string());
    sf_count_t done = 0;
    if (f_ == SampleFormat::float32) {
      done = sf_write_float(file_, s.data(), static_cast<sf_count_t>(s.size()));
    } else {
      // Integer codes as shorts: libsndfile stores PCM_16 verbatim and PCM_S8 as the top byte.
      const int shift = f_ == SampleFormat::int8 ? 8 : 0;
      shorts_.resize(s.size());
      for (size_t i = 0; i < s.size(); ++i) shorts_[i] = static_cast<short>(code_of(s[i], f_) * (1 << shift));
      done = sf_write_short(file_, shorts_.data(), static_cast<sf_count_t>(s.size()));
    }
    if (done != static_cast<sf_count_t>(s.size()))
      throw_output(data_path_.string(), std::string("write failed: ") + sf_strerror(file_));
  }
  void finish(const CaptureMeta& meta) override {
    if (!file_) throw_internal("capture writer finished twice");
    sf_write_sync(file_);
    const int rc = sf_close(file_);
    file_ = nullptr;
    if (rc != 0) throw_output(data_path_.string(), "closing failed: " + std::string(sf_error_number(rc)));
    commit_temp_path(temp_, data_path_);
    CaptureMeta m = meta;
    m.synth["container_sample_rate_hz"] = container_sample_rate(c_, meta.sample_rate_hz);
    write_file_atomic(meta_path_, sidecar_json(m, c_, f_).dump(2) + "\n");
  }

 private:
  Container c_;
  SampleFormat f_;
  uint64_t frames_expected_, frames_ = 0;
  fs::path temp_;
  SNDFILE* file_ = nullptr;
  std::vector<short> shorts_;
};

class RawWriter final : public CaptureWriter {
 public:
  RawWriter(Container c, SampleFormat f, const fs::path& folder, const std::string& stem)
      : c_(c), f_(f), file_(folder / capture_file_name(stem, c)) {
    data_path_ = file_.final_path();
    meta_path_ = folder / sidecar_file_name(stem, c);
    if (c == Container::zstd) {
      cctx_ = ZSTD_createCCtx();
      if (!cctx_) throw_internal("ZSTD_createCCtx failed");
      ZSTD_CCtx_setParameter(cctx_, ZSTD_c_compressionLevel, 3);
      ZSTD_CCtx_setParameter(cctx_, ZSTD_c_checksumFlag, 1);
      zout_.resize(ZSTD_CStreamOutSize());
    }
  }
  ~RawWriter() override {
    if (cctx_) ZSTD_freeCCtx(cctx_);
  }
  void write(std::span<const float> s) override {
    encode_le(s, f_, bytes_);
    if (c_ == Container::zstd) {
      compress(ZSTD_e_continue);
    } else {
      file_.write(std::as_bytes(std::span<const unsigned char>(bytes_)));
    }
  }
  void finish(const CaptureMeta& meta) override {
    if (c_ == Container::zstd) {
      bytes_.clear();
      compress(ZSTD_e_end);
    }
    file_.commit();
    if (c_ == Container::sigmf) {
      write_file_atomic(meta_path_, sigmf_meta_json(meta, f_).dump(2) + "\n");
    } else {
      write_file_atomic(meta_path_, sidecar_json(meta, c_, f_).dump(2) + "\n");
    }
  }

 private:
  void compress(ZSTD_EndDirective mode) {
    ZSTD_inBuffer in{bytes_.data(), bytes_.size(), 0};
    for (;;) {
      ZSTD_outBuffer out{zout_.data(), zout_.size(), 0};
      const size_t rem = ZSTD_compressStream2(cctx_, &out, &in, mode);
      if (ZSTD_isError(rem)) throw_output(data_path_.string(), std::string("zstd: ") + ZSTD_getErrorName(rem));
      file_.write(std::as_bytes(std::span<const unsigned char>(zout_.data(), out.pos)));
      if (mode == ZSTD_e_end ? rem == 0 : in.pos == in.size) break;
    }
  }
  Container c_;
  SampleFormat f_;
  AtomicFile file_;
  ZSTD_CCtx* cctx_ = nullptr;
  std::vector<unsigned char> bytes_, zout_;
};

}  // namespace

std::unique_ptr<CaptureWriter> open_capture_writer(Container c, SampleFormat f, const fs::path& folder,
                                                   const std::string& stem, uint64_t frames, double fs) {
  check_container(c, f, frames, (folder / capture_file_name(stem, c)).string());
  if (!(fs > 0) || !std::isfinite(fs)) throw_usage("capture", "sample rate must be positive");
  if (c == Container::sigmf || c == Container::zstd) return std::make_unique<RawWriter>(c, f, folder, stem);
  return std::make_unique<SndfileWriter>(c, f, folder, stem, frames, fs);
}

}  // namespace salvor::synth
