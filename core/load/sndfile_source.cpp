// Containers read through libsndfile 1.2.0 (WAV, W64, RF64, FLAC, AIFF, ...), API as in
// libsndfile's api.html: sf_open_fd on a descriptor we opened read-only, sf_readf_float
// (integers normalised to ±1.0, libsndfile's default), sf_seek to rewind.
//
// Facts measured with this libsndfile build (Debian libsndfile1 1.2.0; tests/load checks
// them): a WAV header's sizes are 32-bit, so libsndfile silently sees only part of a
// WAV above 4 GiB; the largest rates that survive a write and re-read are 2^31-1 Hz for
// WAV, W64 and RF64, 2^30-1 Hz for AIFF and 655350 Hz for FLAC.

#include <sndfile.h>

#include <algorithm>
#include <cctype>
#include <climits>
#include <cstring>
#include <optional>
#include <vector>

#include "common/error.hpp"
#include "load/load_detail.hpp"

namespace salvor::load::detail {

class SndfileHandle {
 public:
  SndfileHandle(SNDFILE* f, SF_INFO info, std::string name)
      : file(f), info(info), name(std::move(name)), frames(static_cast<uint64_t>(std::max<sf_count_t>(info.frames, 0))) {}
  ~SndfileHandle() {
    if (file) sf_close(file);
  }
  SndfileHandle(const SndfileHandle&) = delete;
  SndfileHandle& operator=(const SndfileHandle&) = delete;
  SNDFILE* file;
  SF_INFO info;
  std::string name;
  uint64_t frames;  // frames to deliver (see SndfileSource::limit)
};

namespace {

std::string lower(std::string s) {
  for (char& c : s) c = static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
  return s;
}

std::string subtype_name(int format) {
  switch (format & SF_FORMAT_SUBMASK) {
    case SF_FORMAT_PCM_S8: return "pcm_s8";
    case SF_FORMAT_PCM_U8: return "pcm_u8";
    case SF_FORMAT_PCM_16: return "pcm_16";
    case SF_FORMAT_PCM_24: return "pcm_24";
    case SF_FORMAT_PCM_32: return "pcm_32";
    case SF_FORMAT_FLOAT: return "float";
    case SF_FORMAT_DOUBLE: return "double";
    default: break;
  }
  SF_FORMAT_INFO fi{};
  fi.format = format & SF_FORMAT_SUBMASK;
  if (sf_command(nullptr, SFC_GET_FORMAT_INFO, &fi, sizeof fi) == 0 && fi.name) return lower(fi.name);
  return "subformat 0x" + std::to_string(format & SF_FORMAT_SUBMASK);
}

std::string major_name(int format) {
  SF_FORMAT_INFO fi{};
  fi.format = format & SF_FORMAT_TYPEMASK;
  if (sf_command(nullptr, SFC_GET_FORMAT_INFO, &fi, sizeof fi) == 0 && fi.name) return fi.name;
  return "libsndfile format";
}

// Largest rate this container keeps exactly through libsndfile (measured, see above).
// For containers not measured, assume only the smallest measured limit.
double max_exact_rate(int format) {
  switch (format & SF_FORMAT_TYPEMASK) {
    case SF_FORMAT_WAV:
    case SF_FORMAT_WAVEX:
    case SF_FORMAT_W64:
    case SF_FORMAT_RF64: return static_cast<double>(INT_MAX);
    case SF_FORMAT_AIFF: return static_cast<double>((1 << 30) - 1);
    default: return 655350.0;
  }
}

// ---- declared lengths ------------------------------------------------------------------
// libsndfile quietly shortens a file whose header announces more data than the file holds
// (measured: a WAV, W64, RF64 or AIFF cut short opens with the smaller frame count and no
// error). To refuse truncated captures, the announced length is read from the header here:
// WAV/RF64 (Microsoft RIFF; EBU Tech 3306 ds64), Sony Wave64 and AIFF (Apple, 1989) chunk
// walks. Unknown or "unset" sizes (0, 0xFFFFFFFF) give nullopt: no check.

uint32_t le32(const std::byte* p) {
  return static_cast<uint32_t>(std::to_integer<uint8_t>(p[0])) | static_cast<uint32_t>(std::to_integer<uint8_t>(p[1])) << 8 |
         static_cast<uint32_t>(std::to_integer<uint8_t>(p[2])) << 16 | static_cast<uint32_t>(std::to_integer<uint8_t>(p[3])) << 24;
}
uint64_t le64(const std::byte* p) { return le32(p) | static_cast<uint64_t>(le32(p + 4)) << 32; }
uint16_t le16(const std::byte* p) {
  return static_cast<uint16_t>(std::to_integer<uint8_t>(p[0]) | std::to_integer<uint8_t>(p[1]) << 8);
}
uint32_t be32(const std::byte* p) {
  return static_cast<uint32_t>(std::to_integer<uint8_t>(p[0])) << 24 | static_cast<uint32_t>(std::to_integer<uint8_t>(p[1])) << 16 |
         static_cast<uint32_t>(std::to_integer<uint8_t>(p[2])) << 8 | static_cast<uint32_t>(std::to_integer<uint8_t>(p[3]));
}
bool tag_is(const std::byte* p, const char* tag) { return std::memcmp(p, tag, 4) == 0; }

constexpr int kMaxChunks = 4096;  // a header walk gives up after this many chunks

std::optional<uint64_t> riff_declared_frames(const InputFile& f, bool rf64) {
  std::byte h[28];
  uint64_t pos = 12;
  uint64_t ds64_data = 0;
  unsigned block_align = 0;
  for (int n = 0; n < kMaxChunks && f.read_at(pos, std::span(h, 8)) == 8; ++n) {
    const uint32_t size = le32(h + 4);
    if (tag_is(h, "ds64") && f.read_at(pos + 8, std::span(h, 16)) == 16) ds64_data = le64(h + 8);
    if (tag_is(h, "fmt ") && f.read_at(pos + 8, std::span(h, 14)) == 14) block_align = le16(h + 12);
    if (tag_is(h, "data")) {
      uint64_t bytes = size;
      if (rf64 && size == 0xFFFFFFFFu) bytes = ds64_data;
      if (bytes == 0 || (!rf64 && size == 0xFFFFFFFFu) || block_align == 0) return std::nullopt;
      return bytes / block_align;
    }
    pos += 8 + static_cast<uint64_t>(size) + (size & 1u);
  }
  return std::nullopt;
}

std::optional<uint64_t> w64_declared_frames(const InputFile& f) {
  std::byte h[40];
  uint64_t pos = 40;  // "riff" GUID, size, "wave" GUID
  unsigned block_align = 0;
  for (int n = 0; n < kMaxChunks && f.read_at(pos, std::span(h, 24)) == 24; ++n) {
    const uint64_t size = le64(h + 16);  // includes the 24-byte chunk header
    if (size < 24) return std::nullopt;
    if (tag_is(h, "fmt ") && f.read_at(pos + 24, std::span(h, 14)) == 14) block_align = le16(h + 12);
    if (tag_is(h, "data")) {
      if (block_align == 0) return std::nullopt;
      return (size - 24) / block_align;
    }
    pos += (size + 7) & ~uint64_t{7};
  }
  return std::nullopt;
}

std::optional<uint64_t> aiff_declared_frames(const InputFile& f) {
  std::byte h[8];
  uint64_t pos = 12;
  for (int n = 0; n < kMaxChunks && f.read_at(pos, std::span(h, 8)) == 8; ++n) {
    const uint32_t size = be32(h + 4);
    if (tag_is(h, "COMM") && f.read_at(pos + 8, std::span(h, 6)) == 6) return be32(h + 2);  // numSampleFrames
    pos += 8 + static_cast<uint64_t>(size) + (size & 1u);
  }
  return std::nullopt;
}

std::optional<uint64_t> declared_frames(const InputFile& f) {
  std::byte magic[16];
  if (f.read_at(0, std::span(magic, 16)) != 16) return std::nullopt;
  if (tag_is(magic, "RIFF")) return riff_declared_frames(f, false);
  if (tag_is(magic, "RF64")) return riff_declared_frames(f, true);
  if (tag_is(magic, "riff") && std::to_integer<uint8_t>(magic[4]) == 0x2E) return w64_declared_frames(f);
  if (tag_is(magic, "FORM")) return aiff_declared_frames(f);
  return std::nullopt;
}

class SndfileSource final : public SampleSource {
 public:
  SndfileSource(std::shared_ptr<SndfileHandle> handle, int channel, size_t chunk_samples)
      : h_(std::move(handle)), channel_(channel),
        buffer_(chunk_samples * static_cast<size_t>(h_->info.channels)) {}

  // Frames to deliver: what the header announces (never more than libsndfile offers).
  uint64_t limit() const { return h_->frames; }

  size_t read(std::span<float> out) override {
    const size_t channels = static_cast<size_t>(h_->info.channels);
    const size_t chunk_frames = buffer_.size() / channels;
    size_t produced = 0;
    while (produced < out.size()) {
      if (frames_read_ >= limit()) break;
      size_t want = static_cast<size_t>(std::min<uint64_t>({chunk_frames, out.size() - produced, limit() - frames_read_}));
      sf_count_t got = sf_readf_float(h_->file, buffer_.data(), static_cast<sf_count_t>(want));
      if (got < 0) got = 0;
      for (sf_count_t i = 0; i < got; ++i)
        out[produced + static_cast<size_t>(i)] = buffer_[static_cast<size_t>(i) * channels + static_cast<size_t>(channel_)];
      produced += static_cast<size_t>(got);
      frames_read_ += static_cast<uint64_t>(got);
      if (static_cast<size_t>(got) < want) {
        int err = sf_error(h_->file);
        if (err != SF_ERR_NO_ERROR)
          throw_input(h_->name, "decoding failed after " + std::to_string(frames_read_) + " of " +
                                    std::to_string(limit()) + " frames: " + sf_strerror(h_->file));
        if (frames_read_ < limit())
          throw_input(h_->name, "file ended after " + std::to_string(frames_read_) + " of the " +
                                    std::to_string(limit()) + " frames its header announces");
        break;
      }
    }
    return produced;
  }

  void rewind() override {
    if (sf_seek(h_->file, 0, SEEK_SET) < 0)
      throw_input(h_->name, std::string("cannot seek back to the start: ") + sf_strerror(h_->file));
    frames_read_ = 0;
  }

 private:
  std::shared_ptr<SndfileHandle> h_;
  int channel_;
  std::vector<float> buffer_;
  uint64_t frames_read_ = 0;
};

}  // namespace

SndfileOpened open_sndfile(const std::filesystem::path& path) {
  auto file = std::make_unique<InputFile>(path);
  const std::string name = file->name();
  const uint64_t size = file->size();
  std::optional<uint64_t> declared = declared_frames(*file);
  SF_INFO info{};  // zeroed: libsndfile reads everything from the header
  int fd = file->release();
  SNDFILE* f = sf_open_fd(fd, SFM_READ, &info, SF_TRUE);
  if (!f) throw_input(name, std::string("libsndfile cannot read the header: ") + sf_strerror(nullptr));
  auto handle = std::make_shared<SndfileHandle>(f, info, name);

  const int major = info.format & SF_FORMAT_TYPEMASK;
  if ((major == SF_FORMAT_WAV || major == SF_FORMAT_WAVEX) && size > 0xFFFFFFFFull)
    throw_input(name, "WAV file is " + std::to_string(size) +
                          " bytes; a WAV header cannot describe more than 4 GiB and libsndfile would "
                          "read only " + std::to_string(info.frames) +
                          " frames of it. Store captures this large as RF64, W64 or raw");
  if (info.channels < 1) throw_input(name, "header says " + std::to_string(info.channels) + " channels");
  if (info.frames <= 0) throw_input(name, "contains no samples");
  // The header walk counts frames as data bytes / block align: only true of plain PCM and
  // float data (an ADPCM block holds many frames).
  const int sub = info.format & SF_FORMAT_SUBMASK;
  const bool plain = sub == SF_FORMAT_PCM_S8 || sub == SF_FORMAT_PCM_U8 || sub == SF_FORMAT_PCM_16 ||
                     sub == SF_FORMAT_PCM_24 || sub == SF_FORMAT_PCM_32 || sub == SF_FORMAT_FLOAT ||
                     sub == SF_FORMAT_DOUBLE;
  if (!plain) declared.reset();
  if (declared && *declared > static_cast<uint64_t>(info.frames))
    throw_input(name, "header announces " + std::to_string(*declared) + " frames but the file holds only " +
                          std::to_string(info.frames) + ": the capture is truncated");
  if (declared) handle->frames = *declared;

  SndfileOpened opened;
  opened.handle = handle;
  auto& facts = opened.facts;
  facts.data_path = path;
  facts.sample_encoding = subtype_name(info.format);
  facts.detail = major_name(info.format) + ", " + facts.sample_encoding;
  facts.channels = info.channels;
  facts.sample_rate_hz = static_cast<double>(info.samplerate);
  facts.max_exact_rate_hz = max_exact_rate(info.format);
  facts.total_samples = handle->frames;
  return opened;
}

std::unique_ptr<SampleSource> make_sndfile_source(std::shared_ptr<SndfileHandle> handle, int channel,
                                                  size_t chunk_samples) {
  return std::make_unique<SndfileSource>(std::move(handle), channel, chunk_samples);
}

}  // namespace salvor::load::detail
