// SPDX-License-Identifier: MIT
#include "rungcal/core/log.hpp"

#include <malloc.h>
#include <unistd.h>

#include <spdlog/sinks/basic_file_sink.h>
#include <spdlog/sinks/rotating_file_sink.h>
#include <spdlog/sinks/stdout_color_sinks.h>
#include <fmt/format.h>
#include <spdlog/spdlog.h>

#include <vector>

#include "rungcal/core/cluster.hpp"

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
    spdlog::sink_ptr file;
    if (rotate_bytes > 0)
      file = std::make_shared<spdlog::sinks::rotating_file_sink_mt>(path, rotate_bytes, rotate_files);
    else
      file = std::make_shared<spdlog::sinks::basic_file_sink_mt>(path, false);
    file->set_level(spdlog::level::debug);
    file->set_pattern("%Y-%m-%dT%H:%M:%S.%e %l " + who + ": %v");
    sinks.push_back(file);
  }
  auto logger = std::make_shared<spdlog::logger>("rungcal", sinks.begin(), sinks.end());
  logger->set_level(spdlog::level::debug);
  spdlog::set_default_logger(logger);
}

}  // namespace rungcal
