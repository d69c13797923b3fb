#pragma once
// Runs work(i) for i = 0..n-1 on a small pool of threads (the calling thread is one of
// them). Items are taken in order from a shared counter, so no lock sits on the hot
// path; the first exception stops the others and is rethrown to the caller. `done`
// (may be empty) is called under a lock after each item with (finished, n).

#include <algorithm>
#include <atomic>
#include <cstddef>
#include <exception>
#include <functional>
#include <mutex>
#include <thread>
#include <vector>

namespace salvor {

inline unsigned worker_count(unsigned requested, size_t items) {
  unsigned t = requested ? requested : std::max(1u, std::thread::hardware_concurrency());
  return static_cast<unsigned>(std::max<size_t>(1, std::min<size_t>(t, items)));
}

template <class Work>
void parallel_for(size_t n, unsigned threads, Work&& work,
                  const std::function<void(size_t, size_t)>& done = {}) {
  std::atomic<size_t> next{0};
  std::atomic<bool> failed{false};
  std::exception_ptr first_error;
  std::mutex mu;
  size_t finished = 0;
  auto worker = [&]() {
    try {
      while (!failed) {
        const size_t i = next++;
        if (i >= n) break;
        work(i);
        std::lock_guard<std::mutex> lock(mu);
        ++finished;
        if (done) done(finished, n);
      }
    } catch (...) {
      std::lock_guard<std::mutex> lock(mu);
      if (!first_error) first_error = std::current_exception();
      failed = true;
    }
  };
  std::vector<std::thread> pool;
  for (unsigned t = 1; t < worker_count(threads, n); ++t) pool.emplace_back(worker);
  worker();
  for (auto& t : pool) t.join();
  if (first_error) std::rethrow_exception(first_error);
}

}  // namespace salvor
