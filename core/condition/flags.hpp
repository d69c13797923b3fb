#pragma once
// Per-sample condition flags and flagged spans: plain data handed downstream as erasure
// hints. A flag byte is a bit set of FlagKind values; a span is a half-open range of
// sample indices of one kind. Spans are built from the flag stream by SpanCollector, so
// a span that straddles two process() calls is reported once.

#include <cstddef>
#include <cstdint>
#include <span>
#include <string>
#include <vector>

namespace salvor {

enum FlagKind : uint8_t {
  flag_clipped = 1u << 0,           // digitizer saturation
  flag_thermal_asperity = 1u << 1,  // baseline pop from a head-disk contact
  flag_dropout = 1u << 2,           // envelope far below its running level
};

// The name used in reports: "clipped", "thermal_asperity", "dropout".
std::string flag_kind_name(FlagKind kind);

struct FlagSpan {
  uint64_t start = 0;  // first flagged sample (index on the stream the span refers to)
  uint64_t end = 0;    // one past the last flagged sample
  FlagKind kind = flag_clipped;
  bool operator==(const FlagSpan&) const = default;
};

// Turns a stream of flag bytes into spans, one open span per kind at a time.
class SpanCollector {
 public:
  // `flags[i]` is the flag byte of sample `first_index + i`; calls must be contiguous.
  void add(uint64_t first_index, std::span<const uint8_t> flags);
  // Closes any open span at `end_index` (call at end of stream).
  void close(uint64_t end_index);
  // Spans closed so far, in order of their end; take_spans() hands them over and clears.
  const std::vector<FlagSpan>& spans() const { return spans_; }
  std::vector<FlagSpan> take_spans();
  void reset();

 private:
  static constexpr int kinds = 3;
  bool open_[kinds] = {false, false, false};
  uint64_t open_start_[kinds] = {0, 0, 0};
  std::vector<FlagSpan> spans_;
};

}  // namespace salvor
