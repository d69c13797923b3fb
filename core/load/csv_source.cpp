// Digitizer-style CSV exports: one sample per line, a time column and a value column.
//
// Accepted layout (salvor's own rules; there is no single CSV standard for scope exports,
// RFC 4180 covers quoting only):
//   - fields separated by ',' or, if a line has none, ';', then tab, then blanks; the
//     separator of the first data line is used for the whole file;
//   - blank lines and lines starting with '#' are skipped anywhere;
//   - lines before the first data line whose fields are not numbers are headers;
//   - fields may be wrapped in double quotes; numbers are read with std::from_chars;
//   - the time column must increase with a uniform step: every step must stay within
//     csv_step_tolerance (relative) of the mean step of the lines before it; the sample
//     rate is (lines - 1) / (last time - first time).
// The file is read twice (check, then samples), each time streaming through a fixed
// buffer; a line longer than kMaxLineBytes is refused.

#include <algorithm>
#include <charconv>
#include <cmath>
#include <cstring>
#include <vector>

#include "common/error.hpp"
#include "load/load_detail.hpp"

namespace salvor::load::detail {

namespace {

constexpr size_t kMaxLineBytes = 1u << 16;

// Splits a file into lines through a fixed buffer; tracks line numbers (1-based).
class LineReader {
 public:
  explicit LineReader(const std::filesystem::path& path)
      : file_(std::make_unique<InputFile>(path)), buffer_(kMaxLineBytes * 2) {}

  // The next line without its terminator ("\n" or "\r\n"); false at the end of the file.
  bool next(std::string_view& line) {
    for (;;) {
      const char* begin = buffer_.data() + begin_;
      const char* nl = static_cast<const char*>(std::memchr(begin, '\n', end_ - begin_));
      if (nl || (eof_ && end_ > begin_)) {
        size_t len = nl ? static_cast<size_t>(nl - begin) : end_ - begin_;
        begin_ += len + (nl ? 1 : 0);
        if (len > kMaxLineBytes) too_long();
        if (len > 0 && begin[len - 1] == '\r') --len;
        line = std::string_view(begin, len);
        ++number_;
        return true;
      }
      if (eof_) return false;
      if (end_ - begin_ > kMaxLineBytes) too_long();
      // Move the partial line to the front and fill the rest.
      std::memmove(buffer_.data(), buffer_.data() + begin_, end_ - begin_);
      end_ -= begin_;
      begin_ = 0;
      size_t got = file_->read_at(offset_, std::as_writable_bytes(
                                               std::span<char>(buffer_.data() + end_, buffer_.size() - end_)));
      offset_ += got;
      end_ += got;
      if (got == 0) eof_ = true;
    }
  }

  uint64_t line_number() const { return number_; }
  const std::string& name() const { return file_->name(); }

 private:
  [[noreturn]] void too_long() {
    throw_input(file_->name(), "line " + std::to_string(number_ + 1) + " is longer than " +
                                   std::to_string(kMaxLineBytes) + " bytes; not a digitizer CSV export");
  }
  std::unique_ptr<InputFile> file_;
  std::vector<char> buffer_;
  size_t begin_ = 0, end_ = 0;
  uint64_t offset_ = 0;
  bool eof_ = false;
  uint64_t number_ = 0;
};

std::string_view trim(std::string_view s) {
  while (!s.empty() && (s.front() == ' ' || s.front() == '\t')) s.remove_prefix(1);
  while (!s.empty() && (s.back() == ' ' || s.back() == '\t')) s.remove_suffix(1);
  if (s.size() >= 2 && s.front() == '"' && s.back() == '"') s = s.substr(1, s.size() - 2);
  return s;
}

bool parse_number(std::string_view s, double& v) {
  s = trim(s);
  if (!s.empty() && s.front() == '+') s.remove_prefix(1);
  if (s.empty()) return false;
  auto [p, ec] = std::from_chars(s.data(), s.data() + s.size(), v);
  return ec == std::errc() && p == s.data() + s.size();
}

char pick_separator(std::string_view line) {
  for (char c : {',', ';', '\t'})
    if (line.find(c) != std::string_view::npos) return c;
  return ' ';
}

// Field `index` of a line (0-based); false if the line has fewer fields.
bool field(std::string_view line, char sep, int index, std::string_view& out) {
  int k = 0;
  size_t pos = 0;
  if (sep == ' ') {
    // Runs of blanks separate fields.
    for (;;) {
      while (pos < line.size() && (line[pos] == ' ' || line[pos] == '\t')) ++pos;
      if (pos >= line.size()) return false;
      size_t end = pos;
      while (end < line.size() && line[end] != ' ' && line[end] != '\t') ++end;
      if (k == index) {
        out = line.substr(pos, end - pos);
        return true;
      }
      ++k;
      pos = end;
    }
  }
  for (;;) {
    size_t end = line.find(sep, pos);
    if (k == index) {
      out = line.substr(pos, end == std::string_view::npos ? std::string_view::npos : end - pos);
      return true;
    }
    if (end == std::string_view::npos) return false;
    pos = end + 1;
    ++k;
  }
}

bool is_skippable(std::string_view line) {
  std::string_view t = trim(line);
  return t.empty() || t.front() == '#';
}

// Parses the time and value of a data line; `what` says which field failed.
struct ParsedLine {
  double time = 0, value = 0;
  bool ok = false;
  std::string problem;
};

ParsedLine parse_line(std::string_view line, char sep, const CsvLayout& layout) {
  ParsedLine r;
  std::string_view f;
  auto number_at = [&](int column, double& v) {
    if (!field(line, sep, column, f)) {
      r.problem = "has no column " + std::to_string(column + 1);
      return false;
    }
    if (!parse_number(f, v)) {
      std::string shown(trim(f).substr(0, 40));
      r.problem = "column " + std::to_string(column + 1) + " \"" + shown + "\" is not a number";
      return false;
    }
    return true;
  };
  if (layout.time_column >= 0 && !number_at(layout.time_column, r.time)) return r;
  if (!number_at(layout.value_column, r.value)) return r;
  r.ok = true;
  return r;
}

class CsvSource final : public SampleSource {
 public:
  CsvSource(std::filesystem::path path, const CsvLayout& layout) : path_(std::move(path)), layout_(layout) {
    rewind();
  }

  size_t read(std::span<float> out) override {
    size_t produced = 0;
    std::string_view line;
    while (produced < out.size() && lines_->next(line)) {
      if (is_skippable(line)) continue;
      if (!seen_data_) sep_ = pick_separator(line);
      ParsedLine p = parse_line(line, sep_, layout_);
      if (!p.ok) {
        if (!seen_data_) continue;  // header line before the data
        throw_input(lines_->name(), "line " + std::to_string(lines_->line_number()) + ": " + p.problem);
      }
      seen_data_ = true;
      out[produced++] = static_cast<float>(p.value);
    }
    return produced;
  }

  void rewind() override {
    lines_ = std::make_unique<LineReader>(path_);
    seen_data_ = false;
    sep_ = ',';
  }

 private:
  std::filesystem::path path_;
  CsvLayout layout_;
  std::unique_ptr<LineReader> lines_;
  bool seen_data_ = false;
  char sep_ = ',';
};

}  // namespace

ContainerFacts scan_csv(const std::filesystem::path& path, const CsvLayout& layout) {
  LineReader lines(path);
  std::string_view line;
  char sep = ',';
  bool seen_data = false;
  uint64_t count = 0;
  double first_time = 0, prev_time = 0;
  while (lines.next(line)) {
    if (is_skippable(line)) continue;
    if (!seen_data) sep = pick_separator(line);
    ParsedLine p = parse_line(line, sep, layout);
    const std::string at = "line " + std::to_string(lines.line_number());
    if (!p.ok) {
      if (!seen_data) continue;
      throw_input(lines.name(), at + ": " + p.problem);
    }
    seen_data = true;
    if (layout.time_column >= 0) {
      if (!std::isfinite(p.time)) throw_input(lines.name(), at + ": time is not a finite number");
      if (count == 0) {
        first_time = p.time;
      } else {
        double step = p.time - prev_time;
        if (!(step > 0))
          throw_input(lines.name(), at + ": time does not increase (step " + std::to_string(step) + " s)");
        if (count >= 2) {
          double mean = (prev_time - first_time) / static_cast<double>(count - 1);
          if (std::fabs(step - mean) > layout.step_tolerance * mean) {
            char buf[160];
            std::snprintf(buf, sizeof buf, ": time step %.9g s differs from the mean step %.9g s by more than %g of it",
                          step, mean, layout.step_tolerance);
            throw_input(lines.name(), at + buf + " (time column is not uniformly spaced)");
          }
        }
      }
      prev_time = p.time;
    }
    ++count;
  }
  if (count == 0) throw_input(lines.name(), "contains no samples (no line with a numeric value column)");
  ContainerFacts facts;
  facts.data_path = path;
  facts.detail = "CSV text, value column " + std::to_string(layout.value_column + 1);
  facts.sample_encoding = "text";
  facts.channels = 1;
  facts.total_samples = count;
  if (layout.time_column >= 0) {
    if (count < 2) throw_input(lines.name(), "needs at least two data lines to derive a sample rate from the time column");
    facts.sample_rate_hz = static_cast<double>(count - 1) / (prev_time - first_time);
    facts.rate_is_measured = true;
    facts.detail += ", time column " + std::to_string(layout.time_column + 1);
  }
  return facts;
}

std::unique_ptr<SampleSource> make_csv_source(const std::filesystem::path& path, const CsvLayout& layout) {
  return std::make_unique<CsvSource>(path, layout);
}

}  // namespace salvor::load::detail
