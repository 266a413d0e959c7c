// SPDX-License-Identifier: MIT
#include "rungcal/core/parallel.hpp"

#include <algorithm>
#include <atomic>
#include <exception>
#include <mutex>
#include <thread>
#include <vector>

namespace rungcal {

int worker_threads(int requested) {
  return requested > 0 ? requested
                       : static_cast<int>(std::max(1u, std::thread::hardware_concurrency()));
}

void parallel_for(std::size_t n, int threads, const std::function<void(std::size_t)>& body) {
  std::atomic<std::size_t> next{0};
  std::atomic<bool> failed{false};
  std::exception_ptr first_error;
  std::mutex error_mutex;
  auto worker = [&] {
    for (std::size_t i = next++; i < n && !failed; i = next++) {
      try {
        body(i);
      } catch (...) {
        std::lock_guard lock(error_mutex);
        if (!first_error) first_error = std::current_exception();
        failed = true;
      }
    }
  };
  const std::size_t count = std::min<std::size_t>(static_cast<std::size_t>(std::max(1, threads)),
                                                  std::max<std::size_t>(n, 1));
  if (count <= 1) {
    worker();
  } else {
    std::vector<std::thread> pool;
    for (std::size_t t = 0; t < count; ++t) pool.emplace_back(worker);
    for (auto& t : pool) t.join();
  }
  if (first_error) std::rethrow_exception(first_error);
}

}  // namespace rungcal
