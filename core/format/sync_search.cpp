// Streaming sync-mark search (see sync_search.hpp).

#include "format/sync_search.hpp"

#include <bit>

#include "common/bits.hpp"
#include "common/error.hpp"

namespace salvor::format {

SyncSearch::SyncSearch(const SyncSearchConfig& config) : config_(config) {
  const size_t len = config.mark.size();
  if (len == 0 || len > 64) throw_usage("sync.mark", "length " + std::to_string(len) + " is outside 1..64");
  if (config.tolerance < 0 || config.tolerance > static_cast<int>(len)) {
    throw_usage("sync.tolerance", "value " + std::to_string(config.tolerance) + " is outside 0.." + std::to_string(len));
  }
  for (uint8_t b : config.mark) {
    if (b > 1) throw_usage("sync.mark", "bits must be 0 or 1");
    want_ = (want_ << 1) | b;
  }
  mask_ = len == 64 ? ~uint64_t{0} : (uint64_t{1} << len) - 1;
}

Progress SyncSearch::process(std::span<const uint8_t> in, std::span<SyncHit> out) {
  Progress p;
  const size_t len = config_.mark.size();
  while (p.consumed < in.size()) {
    // The window ending at the next bit starts at seen_ + 1 - len. A held hit is final
    // once that start is a mark length past it; emit it first (or stop if out is full).
    if (pending_ && seen_ + 1 >= len && seen_ + 1 - len >= pending_->position + len) {
      if (p.produced == out.size()) break;
      out[p.produced++] = *pending_;
      pending_.reset();
    }
    reg_ = ((reg_ << 1) | (in[p.consumed] & 1u)) & mask_;
    ++p.consumed;
    ++seen_;
    if (seen_ < len) continue;
    const int d = popcount64(reg_ ^ want_);
    if (d > config_.tolerance) continue;
    if (!pending_ || d < pending_->distance) pending_ = SyncHit{seen_ - len, d};
  }
  return p;
}

std::optional<SyncHit> SyncSearch::flush() {
  std::optional<SyncHit> h = pending_;
  pending_.reset();
  return h;
}

void SyncSearch::reset() {
  reg_ = 0;
  seen_ = 0;
  pending_.reset();
}

std::string SyncSearch::describe() const {
  return "sync search: " + std::to_string(config_.mark.size()) + "-bit mark, tolerance " +
         std::to_string(config_.tolerance);
}

std::vector<SyncHit> find_sync_marks(std::span<const uint8_t> bits, std::span<const uint8_t> mark, int tolerance) {
  std::vector<SyncHit> hits;
  if (mark.empty() || mark.size() > 64 || bits.size() < mark.size()) return hits;
  SyncSearch search({std::vector<uint8_t>(mark.begin(), mark.end()), tolerance});
  SyncHit buffer[64];
  size_t done = 0;
  while (done < bits.size()) {
    const Progress p = search.process(bits.subspan(done), buffer);
    hits.insert(hits.end(), buffer, buffer + p.produced);
    done += p.consumed;
  }
  if (auto last = search.flush()) hits.push_back(*last);
  return hits;
}

}  // namespace salvor::format
