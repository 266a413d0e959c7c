// SPDX-License-Identifier: MIT
#include "rungcal/core/parallel.hpp"

#include <algorithm>
#include <atomic>
#include <cstdlib>
#include <exception>
#include <mutex>
#include <thread>
#include <vector>

namespace rungcal {

namespace {

// Processes an MPI launcher started on this machine (Open MPI, MPICH/Hydra); 1 otherwise.
unsigned ranks_on_this_machine() {
  for (const char* name : {"OMPI_COMM_WORLD_LOCAL_SIZE", "MPI_LOCALNRANKS"})
    if (const char* v = std::getenv(name)) {
      const long n = std::strtol(v, nullptr, 10);
      if (n > 0) return static_cast<unsigned>(n);
    }
  return 1;
}

}  // namespace

int worker_threads(int requested) {
  if (requested > 0) return requested;
  // Ranks sharing a machine share its cores: two ranks with every core each would run
  // twice as many threads as cores.
  const unsigned cores = std::max(1u, std::thread::hardware_concurrency());
  return static_cast<int>(std::max(1u, cores / ranks_on_this_machine()));
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
