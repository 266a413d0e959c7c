// SPDX-License-Identifier: MIT
#include "rungcal/core/file_lock.hpp"

#include <fcntl.h>
#include <sys/file.h>
#include <unistd.h>

#include <chrono>
#include <thread>

#include <fmt/format.h>
#include <spdlog/spdlog.h>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/error.hpp"

namespace rungcal {

FileLock::FileLock(const std::string& path, double wait_seconds, const std::string& who) {
  // Never through a symlink, mode 0666 less the umask as any new file, and without
  // blocking on something that is not a regular file (docs/operations.md).
  fd_ = open_own_file(path, O_RDWR, "the lock file");
  if (::flock(fd_, LOCK_EX | LOCK_NB) == 0) return;
  waited_ = true;
  spdlog::warn("{}: {} holds the lock; waiting up to {} s", path, who, wait_seconds);
  auto deadline = std::chrono::steady_clock::now() + std::chrono::duration<double>(wait_seconds);
  while (::flock(fd_, LOCK_EX | LOCK_NB) != 0) {
    if (std::chrono::steady_clock::now() >= deadline) {
      ::close(fd_);
      throw BusyError(
          fmt::format("{}: {} holds the lock; gave up after {} s", path, who, wait_seconds));
    }
    std::this_thread::sleep_for(std::chrono::milliseconds(50));
  }
  spdlog::info("{}: lock acquired after waiting", path);
}

FileLock::~FileLock() {
  if (fd_ < 0) return;
  ::flock(fd_, LOCK_UN);
  ::close(fd_);
}

}  // namespace rungcal
