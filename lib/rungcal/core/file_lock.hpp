// SPDX-License-Identifier: MIT
#pragma once

#include <stdexcept>
#include <string>

namespace rungcal {

// Another process held a lock for longer than the wait (exit code 5, busy).
class BusyError : public std::runtime_error {
 public:
  using std::runtime_error::runtime_error;
};

// An exclusive advisory lock (flock) on a file, held for the object's life and released by
// the kernel when the process dies, so a killed holder never leaves it stuck. Waits up to
// wait_seconds for another holder, then throws BusyError naming `who` ("another publisher").
class FileLock {
 public:
  FileLock(const std::string& path, double wait_seconds,
           const std::string& who = "another process");
  ~FileLock();
  FileLock(const FileLock&) = delete;
  FileLock& operator=(const FileLock&) = delete;

  // True when the lock was held by someone else at first and this process waited.
  bool waited() const { return waited_; }

 private:
  int fd_ = -1;
  bool waited_ = false;
};

}  // namespace rungcal
