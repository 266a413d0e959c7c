// SPDX-License-Identifier: MIT
#include "rungcal/core/log.hpp"

#include <malloc.h>
#include <unistd.h>

#include <spdlog/sinks/basic_file_sink.h>
#include <spdlog/sinks/rotating_file_sink.h>
#include <spdlog/sinks/stdout_color_sinks.h>
#include <spdlog/spdlog.h>

#include <vector>

namespace rungcal {

void keep_freed_memory_for_reuse() {
  mallopt(M_TRIM_THRESHOLD, 512 << 20);
  mallopt(M_MMAP_THRESHOLD, 256 << 20);
}

bool stderr_is_terminal() { return ::isatty(STDERR_FILENO) == 1; }

void setup_logging(const std::string& stage, Verbosity verbosity, const std::string& log_file, std::size_t rotate_bytes,
                   std::size_t rotate_files) {
  std::vector<spdlog::sink_ptr> sinks;
  auto console = std::make_shared<spdlog::sinks::stderr_color_sink_mt>();
  spdlog::level::level_enum level = stderr_is_terminal() ? spdlog::level::info : spdlog::level::warn;
  if (verbosity == Verbosity::kQuiet) level = spdlog::level::warn;
  if (verbosity == Verbosity::kVerbose) level = spdlog::level::debug;
  console->set_level(level);
  console->set_pattern("%^rungcal-" + stage + " %l:%$ %v");
  sinks.push_back(console);
  if (!log_file.empty()) {
    spdlog::sink_ptr file;
    if (rotate_bytes > 0)
      file = std::make_shared<spdlog::sinks::rotating_file_sink_mt>(log_file, rotate_bytes, rotate_files);
    else
      file = std::make_shared<spdlog::sinks::basic_file_sink_mt>(log_file, false);
    file->set_level(spdlog::level::debug);
    file->set_pattern("%Y-%m-%dT%H:%M:%S.%e %l rungcal-" + stage + ": %v");
    sinks.push_back(file);
  }
  auto logger = std::make_shared<spdlog::logger>("rungcal", sinks.begin(), sinks.end());
  logger->set_level(spdlog::level::debug);
  spdlog::set_default_logger(logger);
}

}  // namespace rungcal
