// SPDX-License-Identifier: MIT
#pragma once

#include <string>

namespace rungcal {

// An output written under a temporary name in the destination's folder and renamed over the
// destination only by commit(), after fsync of the file and then of the folder. A reader
// therefore sees the old file or the whole new one, never a part, even across a crash.
// Destroyed without commit() (an error was thrown), the temporary file is removed.
//
// File safety (docs/operations.md): the temporary file has an unpredictable name
// (".NAME.rgtmp-XXXXXXXXXXXX.part", 12 random letters and digits) and is created with
// O_CREAT | O_EXCL | O_NOFOLLOW and mode 0666, so the umask gives its permissions as for any
// new file and a planted file or symlink of that name is never written through. A
// destination that exists and is not a regular file (a device, a FIFO, a folder) is refused
// with rule "output_not_regular_file". While it lives the object holds an flock on its
// temporary file; the first output into a folder removes the project's own temporary files
// there that a killed run left behind (see remove_stale_temporaries).
class AtomicOutput {
 public:
  explicit AtomicOutput(std::string destination);
  ~AtomicOutput();
  AtomicOutput(const AtomicOutput&) = delete;
  AtomicOutput& operator=(const AtomicOutput&) = delete;

  // Where to write now (the temporary file's name, for messages and libraries that need a
  // name; prefer fd() or reopen_path()).
  const std::string& temp_path() const { return temp_; }
  const std::string& destination() const { return destination_; }
  // The open temporary file (read-write).
  int fd() const { return fd_; }
  // A name that opens this very file whatever happens to its folder meanwhile:
  // /proc/self/fd/N on Linux, else temp_path(). For libraries that open files by name.
  std::string reopen_path() const;
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
  int fd_ = -1;
};

// Writes bytes to path atomically (AtomicOutput underneath).
void write_file_atomically(const std::string& path, const std::string& bytes);

// Creates the folder of path (and its parents) when missing.
void ensure_parent_folder(const std::string& path);

// fsync a file or folder by path; throws on failure.
void fsync_path(const std::string& path);

// Throws InputError (rule "output_not_regular_file") when path exists and is not a regular
// file (following a symlink): outputs are regular files or absent.
void check_output_path(const std::string& path);

// Throws InputError when path cannot be read as an input: missing ("unreadable_file", "no
// such file"), not a regular file ("input_not_regular_file": a folder, a FIFO, a device), or
// refused by the system (the errno text: a symlink loop, a permission). Opens without
// blocking, so a FIFO is refused at once rather than waited on.
void check_input_file(const std::string& path);

// check_input_file, then the whole file's bytes ("unreadable_file" when it cannot be read).
std::string read_input_file(const std::string& path);

// Opens (creating when missing, mode 0666 less the umask) a file rungcal appends to or
// locks: never through a symlink (O_NOFOLLOW), never blocking, and only a regular file.
// `what` names it in errors ("the lock file"). Throws InputError: "write_failed" with the
// system's reason, "output_not_regular_file".
int open_own_file(const std::string& path, int flags, const std::string& what);

// True for names of this project's temporary files: ".NAME.rgtmp-XXXXXXXXXXXX.part", and
// ".NAME.PID-N.part" as releases before 2026-12 named them.
bool is_temporary_name(const std::string& filename);

// Removes, in folder, this project's temporary files (is_temporary_name) that are regular
// files (not symlinks) owned by this user, last changed before this process started and
// locked by no live writer; returns how many. Anything else is left alone.
int remove_stale_temporaries(const std::string& folder);

// " (No space left on device)" style text of errno e, with a hint for a full disk.
std::string errno_text(int e);

}  // namespace rungcal
