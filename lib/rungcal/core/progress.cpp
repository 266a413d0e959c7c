// SPDX-License-Identifier: MIT
#include "rungcal/core/progress.hpp"

#include <cstdio>

#include <spdlog/spdlog.h>

#include "rungcal/core/log.hpp"

namespace rungcal {

Progress::Progress(std::string label, std::size_t total)
    : label_(std::move(label)),
      total_(total),
      enabled_(stderr_is_terminal()),
      start_(std::chrono::steady_clock::now()),
      last_draw_(start_) {}

Progress::~Progress() { finish(); }

void Progress::advance(std::size_t n) {
  std::size_t done = done_.fetch_add(n) + n;
  if (!enabled_) return;
  auto now = std::chrono::steady_clock::now();
  std::unique_lock lock(mutex_, std::try_to_lock);
  if (!lock.owns_lock()) return;
  if (now - last_draw_ < std::chrono::milliseconds(100) && done < total_) return;
  last_draw_ = now;
  draw(done);
}

void Progress::draw(std::size_t done) {
  constexpr int kWidth = 30;
  double frac = total_ ? static_cast<double>(done) / static_cast<double>(total_) : 1.0;
  int filled = static_cast<int>(frac * kWidth);
  std::fprintf(stderr, "\r%s [%.*s%*s] %zu/%zu", label_.c_str(), filled,
               "##############################", kWidth - filled, "", done, total_);
  std::fflush(stderr);
}

void Progress::finish() {
  std::lock_guard lock(mutex_);
  if (finished_) return;
  finished_ = true;
  if (enabled_) std::fprintf(stderr, "\n");
  double secs = std::chrono::duration<double>(std::chrono::steady_clock::now() - start_).count();
  spdlog::debug("{}: {} of {} done in {:.2f} s", label_, done_.load(), total_, secs);
}

}  // namespace rungcal
