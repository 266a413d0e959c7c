// SPDX-License-Identifier: MIT
#include "rungcal/core/atomic_file.hpp"

#include <fcntl.h>
#include <unistd.h>

#include <atomic>
#include <cerrno>
#include <cstdio>
#include <cstring>
#include <filesystem>
#include <fstream>

#include <fmt/format.h>

#include "rungcal/core/error.hpp"

namespace fs = std::filesystem;

namespace rungcal {
namespace {

std::string unique_temp_name(const std::string& destination) {
  static std::atomic<unsigned> counter{0};
  fs::path dest(destination);
  // Leading dot and ".part" so globs for products never pick the temporary file up.
  return (dest.parent_path() /
          fmt::format(".{}.{}-{}.part", dest.filename().string(), ::getpid(), counter++))
      .string();
}

[[noreturn]] void throw_write_failure(const std::string& path, const std::string& what) {
  throw InputError({path, {}, {}}, "write_failed", fmt::format("{}: {}", what, std::strerror(errno)));
}

}  // namespace

void ensure_parent_folder(const std::string& path) {
  fs::path parent = fs::path(path).parent_path();
  if (parent.empty()) return;
  std::error_code ec;
  fs::create_directories(parent, ec);
  if (ec)
    throw InputError({parent.string(), {}, {}}, "write_failed",
                     "cannot create the output folder: " + ec.message());
}

void fsync_path(const std::string& path) {
  int fd = ::open(path.c_str(), O_RDONLY | O_CLOEXEC);
  if (fd < 0) throw_write_failure(path, "cannot open for fsync");
  int rc = ::fsync(fd);
  ::close(fd);
  if (rc != 0) throw_write_failure(path, "fsync failed");
}

AtomicOutput::AtomicOutput(std::string destination)
    : destination_(std::move(destination)), temp_(unique_temp_name(destination_)) {
  ensure_parent_folder(destination_);
}

AtomicOutput::~AtomicOutput() {
  if (writeback_fd_ >= 0) ::close(writeback_fd_);
  if (!committed_) std::remove(temp_.c_str());
}

void AtomicOutput::start_writeback() {
#ifdef __linux__
  if (writeback_fd_ < 0) writeback_fd_ = ::open(temp_.c_str(), O_RDONLY | O_CLOEXEC);
  // A failure only means commit()'s fsync has more to do, so it is not an error.
  if (writeback_fd_ >= 0) (void)::sync_file_range(writeback_fd_, 0, 0, SYNC_FILE_RANGE_WRITE);
#endif
}

void AtomicOutput::commit() {
  fsync_path(temp_);
  if (std::rename(temp_.c_str(), destination_.c_str()) != 0)
    throw_write_failure(destination_, "cannot rename the temporary file into place");
  committed_ = true;
  fs::path parent = fs::path(destination_).parent_path();
  fsync_path(parent.empty() ? "." : parent.string());
}

void write_file_atomically(const std::string& path, const std::string& bytes) {
  AtomicOutput out(path);
  {
    std::ofstream f(out.temp_path(), std::ios::binary | std::ios::trunc);
    if (!f) throw_write_failure(out.temp_path(), "cannot create");
    f.write(bytes.data(), static_cast<std::streamsize>(bytes.size()));
    f.flush();
    if (!f) throw_write_failure(out.temp_path(), "write failed");
  }
  out.commit();
}

}  // namespace rungcal
