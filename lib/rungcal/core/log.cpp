// SPDX-License-Identifier: MIT
#include "rungcal/core/log.hpp"

#include <fcntl.h>
#include <malloc.h>
#include <sys/stat.h>
#include <unistd.h>

#include <fmt/format.h>
#include <spdlog/sinks/base_sink.h>
#include <spdlog/sinks/stdout_color_sinks.h>
#include <spdlog/spdlog.h>

#include <cerrno>
#include <cstdio>
#include <memory>
#include <mutex>
#include <vector>

#include "rungcal/core/atomic_file.hpp"
#include "rungcal/core/cluster.hpp"
#include "rungcal/core/error.hpp"

namespace rungcal {
namespace {

// A log file opened with O_NOFOLLOW (a symlink at its path is refused, never written
// through), mode 0666 less the umask as any new file, appended to; with rotate_bytes > 0
// it is renamed to PATH.1 (PATH.1 to PATH.2, ...) when a message would take it past that
// size, keeping rotate_files old files. spdlog's own file sinks open by fopen, which follows
// symlinks and cannot be told otherwise.
class SafeFileSink final : public spdlog::sinks::base_sink<std::mutex> {
 public:
  SafeFileSink(std::string path, std::size_t rotate_bytes, std::size_t rotate_files)
      : path_(std::move(path)), rotate_bytes_(rotate_bytes), rotate_files_(rotate_files) {
    open_file(false);
  }
  ~SafeFileSink() override {
    if (fd_ >= 0) ::close(fd_);
  }

 protected:
  void sink_it_(const spdlog::details::log_msg& msg) override {
    spdlog::memory_buf_t formatted;
    formatter_->format(msg, formatted);
    if (rotate_bytes_ > 0 && size_ > 0 && size_ + formatted.size() > rotate_bytes_) rotate();
    std::size_t done = 0;
    while (done < formatted.size()) {
      const ssize_t n = ::write(fd_, formatted.data() + done, formatted.size() - done);
      if (n < 0 && errno == EINTR) continue;
      if (n < 0)
        throw spdlog::spdlog_ex("writing the log file " + path_ + ": " + errno_text(errno));
      done += static_cast<std::size_t>(n);
    }
    size_ += formatted.size();
  }
  void flush_() override {}

 private:
  void open_file(bool truncate) {
    ensure_parent_folder(path_);  // as spdlog's own file sinks do
    fd_ = open_own_file(path_, O_WRONLY | O_APPEND | (truncate ? O_TRUNC : 0), "the log file");
    struct stat st {};
    size_ = ::fstat(fd_, &st) == 0 ? static_cast<std::size_t>(st.st_size) : 0;
  }
  void rotate() {
    ::close(fd_);
    fd_ = -1;
    for (std::size_t i = rotate_files_; i > 1; --i)
      std::rename(fmt::format("{}.{}", path_, i - 1).c_str(),
                  fmt::format("{}.{}", path_, i).c_str());
    if (rotate_files_ > 0) std::rename(path_.c_str(), (path_ + ".1").c_str());
    open_file(true);
  }

  std::string path_;
  std::size_t rotate_bytes_ = 0, rotate_files_ = 0, size_ = 0;
  int fd_ = -1;
};

std::unique_ptr<InputError>& deferred_error() {
  static std::unique_ptr<InputError> error;
  return error;
}

}  // namespace

void throw_deferred_logging_error() {
  if (!deferred_error()) return;
  const InputError e = *deferred_error();
  deferred_error().reset();
  throw e;
}

void keep_freed_memory_for_reuse() {
  mallopt(M_TRIM_THRESHOLD, 512 << 20);
  mallopt(M_MMAP_THRESHOLD, 256 << 20);
}

bool stderr_is_terminal() { return ::isatty(STDERR_FILENO) == 1; }

void setup_logging(const std::string& stage, Verbosity verbosity, const std::string& log_file,
                   std::size_t rotate_bytes, std::size_t rotate_files) {
  std::vector<spdlog::sink_ptr> sinks;
  auto console = std::make_shared<spdlog::sinks::stderr_color_sink_mt>();
  spdlog::level::level_enum level =
      stderr_is_terminal() ? spdlog::level::info : spdlog::level::warn;
  if (verbosity == Verbosity::kQuiet) level = spdlog::level::warn;
  if (verbosity == Verbosity::kVerbose) level = spdlog::level::debug;
  console->set_level(level);
  // Under MPI every rank logs; the rank is named and each rank has its own log file.
  const Cluster& cluster = Cluster::world();
  const std::string who = cluster.size() > 1
                              ? fmt::format("rungcal-{}[rank {}]", stage, cluster.rank())
                              : "rungcal-" + stage;
  console->set_pattern("%^" + who + " %l:%$ %v");
  sinks.push_back(console);
  if (!log_file.empty()) {
    const std::string path =
        cluster.rank() > 0 ? fmt::format("{}.rank{}", log_file, cluster.rank()) : log_file;
    try {
      spdlog::sink_ptr file = std::make_shared<SafeFileSink>(path, rotate_bytes, rotate_files);
      file->set_level(spdlog::level::debug);
      file->set_pattern("%Y-%m-%dT%H:%M:%S.%e %l " + who + ": %v");
      sinks.push_back(file);
    } catch (const InputError& e) {
      deferred_error() = std::make_unique<InputError>(e);
    }
  }
  auto logger = std::make_shared<spdlog::logger>("rungcal", sinks.begin(), sinks.end());
  logger->set_level(spdlog::level::debug);
  spdlog::set_default_logger(logger);
}

}  // namespace rungcal
