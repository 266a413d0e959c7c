// SPDX-License-Identifier: MIT
#pragma once

#include <atomic>
#include <chrono>
#include <cstddef>
#include <mutex>
#include <string>

namespace rungcal {

// A progress bar on stderr for long work. It draws only when stderr is a terminal, so cron
// output stays clean; finish() logs one summary line either way. Thread-safe: workers call
// advance() concurrently.
class Progress {
 public:
  Progress(std::string label, std::size_t total);
  ~Progress();
  void advance(std::size_t n = 1);
  void finish();

 private:
  void draw(std::size_t done);
  std::string label_;
  std::size_t total_;
  std::atomic<std::size_t> done_{0};
  bool enabled_;
  bool finished_ = false;
  std::mutex mutex_;
  std::chrono::steady_clock::time_point start_, last_draw_;
};

}  // namespace rungcal
