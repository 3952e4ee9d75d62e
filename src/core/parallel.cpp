// parallel_for (parallel.hpp): an atomic counter hands out indices; threads live for one call.
#include "specloop/core/parallel.hpp"

#include <algorithm>
#include <atomic>
#include <exception>
#include <mutex>
#include <thread>
#include <vector>

namespace specloop {

void parallel_for(std::size_t n, unsigned jobs, const std::function<void(std::size_t, unsigned)>& work) {
  const unsigned threads = static_cast<unsigned>(std::min<std::size_t>(std::max(1u, jobs), n));
  if (threads <= 1) {
    for (std::size_t i = 0; i < n; ++i) work(i, 0);
    return;
  }
  std::atomic<std::size_t> next{0};
  std::atomic<bool> failed{false};
  std::exception_ptr first;
  std::mutex first_lock;
  const auto run = [&](unsigned worker) {
    for (;;) {
      if (failed.load(std::memory_order_relaxed)) return;
      const std::size_t i = next.fetch_add(1, std::memory_order_relaxed);
      if (i >= n) return;
      try {
        work(i, worker);
      } catch (...) {
        const std::lock_guard<std::mutex> hold(first_lock);
        if (!first) first = std::current_exception();
        failed = true;
        return;
      }
    }
  };
  std::vector<std::thread> pool;
  pool.reserve(threads - 1);
  for (unsigned w = 1; w < threads; ++w) pool.emplace_back(run, w);
  run(0);
  for (std::thread& t : pool) t.join();
  if (first) std::rethrow_exception(first);
}

}  // namespace specloop
