#include "frame/sync_search.hpp"

#include <bit>

#include "common/error.hpp"

namespace salvor::frame {

SyncSearch::SyncSearch(const SyncSearchConfig& config) : config_(config) {
  const size_t n = config_.mark.size();
  if (n < 8 || n > 64) throw_usage("sync.mark", "length " + std::to_string(n) + " outside 8..64 bits");
  if (config_.tolerance < 0 || 2 * static_cast<size_t>(config_.tolerance) >= n)
    throw_usage("sync.tolerance", std::to_string(config_.tolerance) + " must be >= 0 and below half the mark length");
  for (uint8_t b : config_.mark) {
    if (b > 1) throw_usage("sync.mark", "bits must be 0 or 1");
    mark_bits_ = (mark_bits_ << 1) | b;
  }
  mask_ = n == 64 ? ~0ull : ((1ull << n) - 1);
  reset();
}

void SyncSearch::reset() {
  reg_ = 0;
  count_ = 0;
  pending_ = false;
  best_ = {};
}

void SyncSearch::process(std::span<const uint8_t> bits, std::vector<SyncHit>& hits) {
  const uint64_t n = config_.mark.size();
  for (uint8_t b : bits) {
    reg_ = ((reg_ << 1) | (b & 1u)) & mask_;
    ++count_;
    if (pending_ && count_ - best_.end_bit >= n) {
      hits.push_back(best_);
      pending_ = false;
    }
    if (count_ < n) continue;
    int d = std::popcount((reg_ ^ mark_bits_) & mask_);
    if (d <= config_.tolerance) {
      if (!pending_ || d < best_.distance) {
        best_ = {count_, d};
        pending_ = true;
      }
    }
  }
}

void SyncSearch::flush(std::vector<SyncHit>& hits) {
  if (pending_) hits.push_back(best_);
  pending_ = false;
}

std::string SyncSearch::describe() const {
  return "sync search: " + std::to_string(config_.mark.size()) + "-bit mark, tolerance " +
         std::to_string(config_.tolerance);
}

int hamming_distance(std::span<const uint8_t> a, std::span<const uint8_t> b) {
  if (a.size() != b.size()) throw_internal("hamming_distance: lengths differ");
  int d = 0;
  for (size_t i = 0; i < a.size(); ++i) d += (a[i] ^ b[i]) & 1;
  return d;
}

}  // namespace salvor::frame
