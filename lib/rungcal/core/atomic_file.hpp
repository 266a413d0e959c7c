// SPDX-License-Identifier: MIT
#pragma once

#include <string>

namespace rungcal {

// An output written under a temporary name in the destination's folder and renamed over the
// destination only by commit(), after fsync of the file and then of the folder. A reader
// therefore sees the old file or the whole new one, never a part, even across a crash.
// Destroyed without commit() (an error was thrown), the temporary file is removed.
class AtomicOutput {
 public:
  explicit AtomicOutput(std::string destination);
  ~AtomicOutput();
  AtomicOutput(const AtomicOutput&) = delete;
  AtomicOutput& operator=(const AtomicOutput&) = delete;

  // Where to write now.
  const std::string& temp_path() const { return temp_; }
  const std::string& destination() const { return destination_; }
  // fsync + rename + fsync(folder). Throws InputError (rule "write_failed") on failure.
  void commit();
  // Asks the kernel to start writing what the temporary file holds so far to disk (Linux
  // sync_file_range; nothing elsewhere), so that commit()'s fsync of a large file waits for
  // its last part rather than all of it. Advisory: durability comes from commit() alone.
  void start_writeback();

 private:
  std::string destination_;
  std::string temp_;
  bool committed_ = false;
  int writeback_fd_ = -1;  // opened by the first start_writeback()
};

// Writes bytes to path atomically (AtomicOutput underneath).
void write_file_atomically(const std::string& path, const std::string& bytes);

// Creates the folder of path (and its parents) when missing.
void ensure_parent_folder(const std::string& path);

// fsync a file or folder by path; throws on failure.
void fsync_path(const std::string& path);

}  // namespace rungcal
