// SPDX-License-Identifier: MIT
#include "rungcal/core/atomic_file.hpp"

#include <dirent.h>
#include <fcntl.h>
#include <sys/file.h>
#include <sys/random.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

#include <algorithm>
#include <cctype>
#include <cerrno>
#include <cstdio>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <mutex>
#include <set>
#include <sstream>

#include <fmt/format.h>
#include <spdlog/spdlog.h>

#include "rungcal/core/error.hpp"

namespace fs = std::filesystem;

namespace rungcal {
namespace {

// When this process started (its first static initialisation): temporary files changed
// before it may be a killed run's.
const struct timespec kProcessStart = [] {
  struct timespec t {};
  ::clock_gettime(CLOCK_REALTIME, &t);
  return t;
}();

constexpr char kTempMarker[] = ".rgtmp-";
constexpr std::size_t kRandomChars = 12;

// kRandomChars letters and digits from the kernel's random source (62^12: about 71 bits).
std::string random_suffix() {
  static constexpr char kAlphabet[] =
      "abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ0123456789";
  unsigned char bytes[kRandomChars];
  std::size_t got = 0;
  while (got < sizeof bytes) {
    const ssize_t n = ::getrandom(bytes + got, sizeof bytes - got, 0);
    if (n < 0 && errno == EINTR) continue;
    if (n <= 0) throw std::runtime_error("getrandom failed: " + std::string(std::strerror(errno)));
    got += static_cast<std::size_t>(n);
  }
  std::string s;
  for (unsigned char b : bytes) s += kAlphabet[b % (sizeof kAlphabet - 1)];
  return s;
}

[[noreturn]] void throw_write_failure(const std::string& path, const std::string& what, int e) {
  throw WriteError({path, {}, {}}, fmt::format("{}: {}", what, errno_text(e)));
}

bool older_than_this_process(const struct stat& st) {
  return st.st_mtim.tv_sec < kProcessStart.tv_sec ||
         (st.st_mtim.tv_sec == kProcessStart.tv_sec && st.st_mtim.tv_nsec < kProcessStart.tv_nsec);
}

// Each folder is cleaned once per process, by its first output.
void remove_stale_temporaries_once(const std::string& folder) {
  static std::mutex mutex;
  static std::set<std::string> done;
  {
    std::lock_guard<std::mutex> lock(mutex);
    if (!done.insert(folder).second) return;
  }
  remove_stale_temporaries(folder);
}

}  // namespace

std::string errno_text(int e) {
  if (e == ENOSPC) return "No space left on device (ENOSPC): the disk is full";
  if (e == EDQUOT) return "Disk quota exceeded (EDQUOT)";
  return std::strerror(e);
}

bool is_temporary_name(const std::string& name) {
  const std::string suffix = ".part";
  if (name.size() < 2 + suffix.size() || name[0] != '.' ||
      name.compare(name.size() - suffix.size(), suffix.size(), suffix) != 0)
    return false;
  const std::string stem = name.substr(0, name.size() - suffix.size());
  const auto marker = stem.rfind(kTempMarker);
  if (marker != std::string::npos && marker > 1) {
    const std::string random = stem.substr(marker + std::strlen(kTempMarker));
    return random.size() == kRandomChars && std::all_of(random.begin(), random.end(), [](char c) {
             return std::isalnum(static_cast<unsigned char>(c));
           });
  }
  // Older releases: ".NAME.PID-N.part".
  const auto dot = stem.rfind('.');
  if (dot == std::string::npos || dot < 2) return false;
  const std::string tail = stem.substr(dot + 1);
  const auto dash = tail.find('-');
  if (dash == std::string::npos || dash == 0 || dash + 1 == tail.size()) return false;
  return std::all_of(
             tail.begin(), tail.end(),
             [](char c) { return c == '-' || std::isdigit(static_cast<unsigned char>(c)); }) &&
         tail.find('-', dash + 1) == std::string::npos;
}

int remove_stale_temporaries(const std::string& folder) {
  const std::string dir = folder.empty() ? "." : folder;
  int dfd = ::open(dir.c_str(), O_RDONLY | O_DIRECTORY | O_CLOEXEC);
  if (dfd < 0) return 0;
  DIR* d = ::fdopendir(dfd);
  if (!d) {
    ::close(dfd);
    return 0;
  }
  int removed = 0;
  while (const struct dirent* e = ::readdir(d)) {
    const std::string name = e->d_name;
    if (!is_temporary_name(name)) continue;
    struct stat st {};
    // Not followed: a symlink of that name is not ours and stays.
    if (::fstatat(dfd, name.c_str(), &st, AT_SYMLINK_NOFOLLOW) != 0 || !S_ISREG(st.st_mode) ||
        st.st_uid != ::geteuid() || !older_than_this_process(st))
      continue;
    const int fd = ::openat(dfd, name.c_str(), O_RDONLY | O_NOFOLLOW | O_NONBLOCK | O_CLOEXEC);
    if (fd < 0) continue;
    // A live writer holds an flock on its temporary file; a killed one's went with it.
    struct stat again {};
    const bool same =
        ::fstat(fd, &again) == 0 && again.st_ino == st.st_ino && again.st_dev == st.st_dev;
    if (same && ::flock(fd, LOCK_EX | LOCK_NB) == 0 && ::unlinkat(dfd, name.c_str(), 0) == 0) {
      ++removed;
      spdlog::info("{}: removed a temporary file left by an earlier run that was stopped",
                   (fs::path(dir) / name).string());
    }
    ::close(fd);
  }
  ::closedir(d);
  return removed;
}

void ensure_parent_folder(const std::string& path) {
  fs::path parent = fs::path(path).parent_path();
  if (parent.empty()) return;
  std::error_code ec;
  fs::create_directories(parent, ec);
  if (!ec) return;
  const std::string message = "cannot create the output folder: " + errno_text(ec.value());
  // A path through a regular file is a mistake in what was given (exit 2); a full disk or a
  // permission is the machine's refusal (exit 7).
  if (ec.value() == ENOTDIR || ec.value() == EEXIST)
    throw InputError({parent.string(), {}, {}}, "write_failed", message);
  throw WriteError({parent.string(), {}, {}}, message);
}

void fsync_path(const std::string& path) {
  int fd = ::open(path.c_str(), O_RDONLY | O_CLOEXEC);
  if (fd < 0) throw_write_failure(path, "cannot open for fsync", errno);
  int rc = ::fsync(fd);
  const int e = errno;
  ::close(fd);
  if (rc != 0) throw_write_failure(path, "fsync failed", e);
}

void check_output_path(const std::string& path) {
  struct stat st {};
  if (::stat(path.c_str(), &st) != 0) return;  // absent (or a dangling link, replaced)
  if (S_ISREG(st.st_mode)) return;
  const char* what = S_ISDIR(st.st_mode)                          ? "a folder"
                     : S_ISFIFO(st.st_mode)                       ? "a FIFO"
                     : S_ISCHR(st.st_mode) || S_ISBLK(st.st_mode) ? "a device"
                     : S_ISSOCK(st.st_mode)                       ? "a socket"
                                                                  : "not a regular file";
  throw InputError({path, {}, {}}, "output_not_regular_file",
                   fmt::format("the output path exists and is {}: outputs must be regular files "
                               "or absent, and it is not replaced",
                               what));
}

void check_input_file(const std::string& path) {
  const int fd = ::open(path.c_str(), O_RDONLY | O_NONBLOCK | O_CLOEXEC);
  if (fd < 0) {
    const int e = errno;
    if (e == ENOENT) throw InputError({path, {}, {}}, "unreadable_file", "no such file");
    throw InputError({path, {}, {}}, "unreadable_file", "cannot open: " + errno_text(e));
  }
  struct stat st {};
  const int rc = ::fstat(fd, &st);
  ::close(fd);
  if (rc != 0)
    throw InputError({path, {}, {}}, "unreadable_file", "cannot stat: " + errno_text(errno));
  if (S_ISREG(st.st_mode)) return;
  const char* what = S_ISDIR(st.st_mode)                          ? "a folder"
                     : S_ISFIFO(st.st_mode)                       ? "a FIFO"
                     : S_ISCHR(st.st_mode) || S_ISBLK(st.st_mode) ? "a device"
                                                                  : "not a regular file";
  throw InputError({path, {}, {}}, "input_not_regular_file",
                   fmt::format("the input is {}: inputs must be regular files", what));
}

std::string read_input_file(const std::string& path) {
  check_input_file(path);
  std::ifstream in(path, std::ios::binary);
  if (!in) throw InputError({path, {}, {}}, "unreadable_file", "cannot open the file for reading");
  std::stringstream ss;
  ss << in.rdbuf();
  return ss.str();
}

int open_own_file(const std::string& path, int flags, const std::string& what) {
  const int fd = ::open(path.c_str(), flags | O_CREAT | O_NOFOLLOW | O_NONBLOCK | O_CLOEXEC, 0666);
  if (fd < 0) {
    const int e = errno;
    const std::string message =
        fmt::format("cannot open or create {}: {}{}", what, errno_text(e),
                    e == ELOOP ? " (it is a symlink, which is never followed)" : "");
    // A symlink planted where rungcal writes is a hazard in what it was given (exit 2), not
    // a machine that refused a write (exit 7).
    if (e == ELOOP) throw InputError({path, {}, {}}, "write_failed", message);
    throw WriteError({path, {}, {}}, message);
  }
  struct stat st {};
  if (::fstat(fd, &st) != 0 || !S_ISREG(st.st_mode)) {
    ::close(fd);
    throw InputError({path, {}, {}}, "output_not_regular_file",
                     what + " exists and is not a regular file");
  }
  return fd;
}

AtomicOutput::AtomicOutput(std::string destination) : destination_(std::move(destination)) {
  ensure_parent_folder(destination_);
  check_output_path(destination_);
  const fs::path dest(destination_);
  remove_stale_temporaries_once(dest.parent_path().string());
  // Leading dot and ".part" so globs for products never pick the temporary file up.
  for (int attempt = 0; fd_ < 0; ++attempt) {
    temp_ = (dest.parent_path() /
             fmt::format(".{}{}{}.part", dest.filename().string(), kTempMarker, random_suffix()))
                .string();
    fd_ = ::open(temp_.c_str(), O_RDWR | O_CREAT | O_EXCL | O_NOFOLLOW | O_CLOEXEC, 0666);
    if (fd_ < 0 && (errno != EEXIST || attempt >= 100))
      throw_write_failure(destination_, "cannot create the temporary file " + temp_, errno);
  }
  // Held while this object lives: remove_stale_temporaries leaves a locked file alone.
  ::flock(fd_, LOCK_EX | LOCK_NB);
}

AtomicOutput::~AtomicOutput() {
  if (!committed_) ::unlink(temp_.c_str());
  if (fd_ >= 0) ::close(fd_);
}

std::string AtomicOutput::reopen_path() const {
#ifdef __linux__
  const std::string proc = fmt::format("/proc/self/fd/{}", fd_);
  struct stat a {
  }, b{};
  if (::stat(proc.c_str(), &a) == 0 && ::fstat(fd_, &b) == 0 && a.st_ino == b.st_ino &&
      a.st_dev == b.st_dev)
    return proc;
#endif
  return temp_;
}

void AtomicOutput::start_writeback() {
#ifdef __linux__
  // A failure only means commit()'s fsync has more to do, so it is not an error.
  (void)::sync_file_range(fd_, 0, 0, SYNC_FILE_RANGE_WRITE);
#endif
}

void AtomicOutput::commit() {
  if (::fsync(fd_) != 0) throw_write_failure(destination_, "fsync failed", errno);
  // Checked again: the destination may have been made something else since the start.
  check_output_path(destination_);
  if (std::rename(temp_.c_str(), destination_.c_str()) != 0)
    throw_write_failure(destination_, "cannot rename the temporary file into place", errno);
  committed_ = true;
  fs::path parent = fs::path(destination_).parent_path();
  fsync_path(parent.empty() ? "." : parent.string());
}

void write_file_atomically(const std::string& path, const std::string& bytes) {
  AtomicOutput out(path);
  std::size_t done = 0;
  while (done < bytes.size()) {
    const ssize_t n = ::write(out.fd(), bytes.data() + done, bytes.size() - done);
    if (n < 0 && errno == EINTR) continue;
    if (n < 0) throw_write_failure(path, "write failed", errno);
    done += static_cast<std::size_t>(n);
  }
  out.commit();
}

}  // namespace rungcal
