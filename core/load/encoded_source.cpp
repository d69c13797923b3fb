// Headerless sample streams: raw files and zstd-compressed raw files, interleaved
// channels, any encoding of load/sample_encoding.hpp.
//
// zstd: frames as in RFC 8878 (Collet & Kucherawy, "Zstandard Compression and the
// 'application/zstd' Media Type", 2021), decoded with libzstd's streaming API
// (ZSTD_decompressStream, zstd.h of libzstd 1.5.4). Concatenated and skippable frames
// decode as one stream. The decoder's window is capped by libzstd's default
// ZSTD_d_windowLogMax (2^27 bytes), which bounds memory whatever the frame asks for.

#include <zstd.h>

#include <algorithm>
#include <vector>

#include "common/error.hpp"
#include "load/load_detail.hpp"

namespace salvor::load::detail {

namespace {

std::string frame_words(const EncodedLayout& l) {
  std::string enc(encoding_name(l.encoding));
  if (l.channels == 1) return enc + " samples";
  return "frames of " + std::to_string(l.channels) + " " + enc + " samples";
}

// Picks the chosen channel out of whole interleaved frames. `bytes` holds whole frames.
size_t decode_frames(const EncodedLayout& l, std::span<const std::byte> bytes, std::span<float> out) {
  const size_t sample_bytes = encoding_bytes(l.encoding);
  const size_t frame_bytes = sample_bytes * static_cast<size_t>(l.channels);
  const size_t frames = bytes.size() / frame_bytes;
  decode_strided(l.encoding, bytes.data() + sample_bytes * static_cast<size_t>(l.channel), frame_bytes, frames,
                 out.data());
  return frames;
}

// ---- raw ------------------------------------------------------------------------------

class RawSource final : public SampleSource {
 public:
  RawSource(std::unique_ptr<InputFile> file, const EncodedLayout& layout, size_t chunk_samples)
      : file_(std::move(file)), layout_(layout),
        frame_bytes_(encoding_bytes(layout.encoding) * static_cast<size_t>(layout.channels)),
        buffer_(chunk_samples * frame_bytes_), next_byte_(layout.start_byte) {}

  size_t read(std::span<float> out) override {
    size_t produced = 0;
    while (produced < out.size() && next_byte_ < layout_.end_byte) {
      uint64_t frames_left = (layout_.end_byte - next_byte_) / frame_bytes_;
      size_t frames = static_cast<size_t>(
          std::min<uint64_t>({frames_left, out.size() - produced, buffer_.size() / frame_bytes_}));
      if (frames == 0) break;
      std::span<std::byte> chunk(buffer_.data(), frames * frame_bytes_);
      size_t got = file_->read_at(next_byte_, chunk);
      if (got != chunk.size())
        throw_input(file_->name(), "file ended at byte " + std::to_string(next_byte_ + got) +
                                       ", before its stated length (was it truncated while open?)");
      produced += decode_frames(layout_, chunk, out.subspan(produced));
      next_byte_ += chunk.size();
    }
    return produced;
  }

  void rewind() override { next_byte_ = layout_.start_byte; }

 private:
  std::unique_ptr<InputFile> file_;
  EncodedLayout layout_;
  size_t frame_bytes_;
  std::vector<std::byte> buffer_;
  uint64_t next_byte_;
};

// ---- zstd -----------------------------------------------------------------------------

class ZstdSource final : public SampleSource {
 public:
  ZstdSource(std::unique_ptr<InputFile> file, const EncodedLayout& layout, size_t chunk_samples)
      : file_(std::move(file)), layout_(layout),
        frame_bytes_(encoding_bytes(layout.encoding) * static_cast<size_t>(layout.channels)),
        in_buffer_(ZSTD_DStreamInSize()),
        out_buffer_(std::max<size_t>(chunk_samples * frame_bytes_, frame_bytes_)) {
    dctx_ = ZSTD_createDCtx();
    if (!dctx_) throw_internal("ZSTD_createDCtx failed (out of memory?)");
    reset_stream();
  }
  ~ZstdSource() override { ZSTD_freeDCtx(dctx_); }
  ZstdSource(const ZstdSource&) = delete;
  ZstdSource& operator=(const ZstdSource&) = delete;

  size_t read(std::span<float> out) override {
    size_t produced = 0;
    while (produced < out.size()) {
      // Whole frames pending in out_buffer_ first.
      size_t whole = (pending_end_ - pending_begin_) / frame_bytes_;
      if (whole > 0) {
        size_t frames = std::min(whole, out.size() - produced);
        std::span<const std::byte> bytes(out_buffer_.data() + pending_begin_, frames * frame_bytes_);
        produced += decode_frames(layout_, bytes, out.subspan(produced));
        pending_begin_ += bytes.size();
        continue;
      }
      // Keep the partial frame at the front, then decompress more behind it.
      size_t partial = pending_end_ - pending_begin_;
      std::copy(out_buffer_.begin() + static_cast<std::ptrdiff_t>(pending_begin_),
                out_buffer_.begin() + static_cast<std::ptrdiff_t>(pending_end_), out_buffer_.begin());
      pending_begin_ = 0;
      pending_end_ = partial;
      size_t fresh = decompress_into(std::span(out_buffer_).subspan(partial));
      if (fresh == 0) {
        if (header_left_ > 0)
          throw_input(file_->name(), "decompressed stream is " + std::to_string(decompressed_total_) +
                                         " bytes, shorter than the stated header of " +
                                         std::to_string(layout_.start_byte) + " bytes");
        if (partial != 0)
          throw_input(file_->name(), "decompressed stream is " + std::to_string(decompressed_total_) +
                                         " bytes; after a header of " + std::to_string(layout_.start_byte) +
                                         " bytes that is not a whole number of " + frame_words(layout_));
        break;
      }
      // Drop header bytes of the decompressed stream.
      size_t skip = static_cast<size_t>(std::min<uint64_t>(header_left_, fresh));
      if (skip > 0) {
        std::copy(out_buffer_.begin() + static_cast<std::ptrdiff_t>(partial + skip),
                  out_buffer_.begin() + static_cast<std::ptrdiff_t>(partial + fresh),
                  out_buffer_.begin() + static_cast<std::ptrdiff_t>(partial));
        header_left_ -= skip;
        fresh -= skip;
      }
      pending_end_ = partial + fresh;
    }
    return produced;
  }

  void rewind() override { reset_stream(); }

 private:
  void reset_stream() {
    ZSTD_DCtx_reset(dctx_, ZSTD_reset_session_only);
    in_ = ZSTD_inBuffer{in_buffer_.data(), 0, 0};
    file_offset_ = 0;
    eof_ = false;
    frame_complete_ = true;
    decompressed_total_ = 0;
    header_left_ = layout_.start_byte;
    pending_begin_ = pending_end_ = 0;
  }

  // Decompresses into `out`; returns bytes written, 0 only at the clean end of the stream.
  size_t decompress_into(std::span<std::byte> out) {
    size_t written = 0;
    while (written == 0) {
      if (in_.pos == in_.size && !eof_) {
        size_t got = file_->read_at(file_offset_, std::span(in_buffer_));
        file_offset_ += got;
        in_ = ZSTD_inBuffer{in_buffer_.data(), got, 0};
        if (got == 0) eof_ = true;
      }
      ZSTD_outBuffer ob{out.data(), out.size(), 0};
      size_t before = in_.pos;
      size_t r = ZSTD_decompressStream(dctx_, &ob, &in_);
      if (ZSTD_isError(r))
        throw_input(file_->name(), std::string("zstd stream is damaged near compressed byte ") +
                                       std::to_string(file_offset_ - in_.size + before) + ": " +
                                       ZSTD_getErrorName(r));
      // Only a call that moved data says where we are: with no input left, libzstd
      // returns the size of the next frame header even right after a frame ended.
      if (ob.pos > 0 || in_.pos > before) frame_complete_ = (r == 0);
      written = ob.pos;
      decompressed_total_ += ob.pos;
      if (ob.pos == 0 && in_.pos == in_.size && eof_) {
        // The last frame ended cleanly (and its checksum, if any, matched)?
        if (!frame_complete_)
          throw_input(file_->name(), "zstd frame is truncated: the file ends inside a frame after " +
                                         std::to_string(file_offset_) + " compressed bytes");
        break;
      }
    }
    return written;
  }

  std::unique_ptr<InputFile> file_;
  EncodedLayout layout_;
  size_t frame_bytes_;
  ZSTD_DCtx* dctx_ = nullptr;
  std::vector<std::byte> in_buffer_;
  std::vector<std::byte> out_buffer_;
  ZSTD_inBuffer in_{};
  uint64_t file_offset_ = 0;
  bool eof_ = false;
  bool frame_complete_ = true;  // no frame begun, or the last one ended
  uint64_t decompressed_total_ = 0;
  uint64_t header_left_ = 0;
  size_t pending_begin_ = 0, pending_end_ = 0;
};

}  // namespace

std::unique_ptr<SampleSource> make_raw_source(std::unique_ptr<InputFile> file, const EncodedLayout& layout,
                                              size_t chunk_samples) {
  return std::make_unique<RawSource>(std::move(file), layout, chunk_samples);
}

std::unique_ptr<SampleSource> make_zstd_source(std::unique_ptr<InputFile> file, const EncodedLayout& layout,
                                               size_t chunk_samples) {
  return std::make_unique<ZstdSource>(std::move(file), layout, chunk_samples);
}

}  // namespace salvor::load::detail
