// SPDX-License-Identifier: MIT
#include "rungcal/core/cluster.hpp"

#include <cstdlib>
#include <exception>
#include <limits>
#include <stdexcept>

#include <fmt/format.h>
#include <spdlog/spdlog.h>

#include "rungcal/core/byte_buffer.hpp"
#include "rungcal/core/error.hpp"
#include "rungcal/core/fault.hpp"
#include "rungcal/core/parallel.hpp"

#ifdef RUNGCAL_WITH_MPI
#include <mpi.h>
#endif

namespace rungcal {
namespace {

thread_local int local_scope_depth = 0;

// Launchers set these in every process they start: Open MPI, MPICH/Hydra, PMIx.
bool launched_by_mpi() {
  for (const char* name : {"OMPI_COMM_WORLD_SIZE", "PMI_SIZE", "PMIX_RANK"})
    if (std::getenv(name)) return true;
  return false;
}

#ifdef RUNGCAL_WITH_MPI
void finalize_mpi() {
  int finalized = 0;
  MPI_Finalized(&finalized);
  if (!finalized) MPI_Finalize();
}
#endif

enum class Outcome : std::uint8_t { kOk = 0, kInputError = 1, kOtherError = 2 };

std::string encode_error(const std::exception_ptr& error) {
  ByteWriter w;
  try {
    std::rethrow_exception(error);
  } catch (const InputError& e) {
    w.put(Outcome::kInputError);
    w.put_string(e.where().file);
    w.put<std::uint8_t>(e.where().row.has_value());
    w.put<std::int64_t>(e.where().row.value_or(0));
    w.put_string(e.where().column);
    w.put_string(e.where().row_label);
    w.put_string(e.where().column_label);
    w.put_string(e.rule());
    w.put_string(e.detail());
  } catch (const std::exception& e) {
    w.put(Outcome::kOtherError);
    w.put_string(e.what());
  } catch (...) {
    w.put(Outcome::kOtherError);
    w.put_string("unknown exception");
  }
  return w.release();
}

[[noreturn]] void rethrow_encoded(ByteReader& r, Outcome kind, int rank) {
  if (kind == Outcome::kInputError) {
    InputLocation where;
    where.file = r.get_string();
    const bool has_row = r.get<std::uint8_t>() != 0;
    const auto row = r.get<std::int64_t>();
    if (has_row) where.row = row;
    where.column = r.get_string();
    where.row_label = r.get_string();
    where.column_label = r.get_string();
    std::string rule = r.get_string();
    throw InputError(where, rule, r.get_string());
  }
  throw std::runtime_error(fmt::format("rank {}: {}", rank, r.get_string()));
}

}  // namespace

bool Cluster::built_with_mpi() {
#ifdef RUNGCAL_WITH_MPI
  return true;
#else
  return false;
#endif
}

const Cluster& Cluster::world() {
  static const Cluster one(0, 1);
  if (local_scope_depth > 0) return one;
  static const Cluster launched = [] {
#ifdef RUNGCAL_WITH_MPI
    if (launched_by_mpi()) {
      int provided = 0;
      // Only the thread that initialised MPI calls it; worker threads never do.
      MPI_Init_thread(nullptr, nullptr, MPI_THREAD_FUNNELED, &provided);
      std::atexit(finalize_mpi);
      int rank = 0, size = 1;
      MPI_Comm_rank(MPI_COMM_WORLD, &rank);
      MPI_Comm_size(MPI_COMM_WORLD, &size);
      return Cluster(rank, size);
    }
#else
    // Each launched process would do the whole job and write the same products.
    if (launched_by_mpi())
      spdlog::warn(
          "this rungcal was built without MPI: every process mpirun started runs the whole "
          "job on its own (rebuild with Open MPI installed, or run one process)");
#endif
    return Cluster(0, 1);
  }();
  return launched;
}

std::vector<std::string> Cluster::all_gather(const std::string& mine) const {
  if (size_ == 1) return {mine};
#ifdef RUNGCAL_WITH_MPI
  if (mine.size() > static_cast<std::size_t>(std::numeric_limits<int>::max()))
    throw std::runtime_error("a rank's results exceed the 2 GiB one MPI message can carry");
  const int count = static_cast<int>(mine.size());
  std::vector<int> counts(static_cast<std::size_t>(size_)), offsets(counts.size());
  MPI_Allgather(&count, 1, MPI_INT, counts.data(), 1, MPI_INT, MPI_COMM_WORLD);
  long long total = 0;
  for (std::size_t r = 0; r < counts.size(); ++r) {
    if (total > std::numeric_limits<int>::max())
      throw std::runtime_error("the gathered results exceed the 2 GiB one MPI call can carry");
    offsets[r] = static_cast<int>(total);
    total += counts[r];
  }
  std::string all(static_cast<std::size_t>(total), '\0');
  MPI_Allgatherv(mine.data(), count, MPI_CHAR, all.data(), counts.data(), offsets.data(), MPI_CHAR,
                 MPI_COMM_WORLD);
  std::vector<std::string> out;
  for (std::size_t r = 0; r < counts.size(); ++r)
    out.push_back(
        all.substr(static_cast<std::size_t>(offsets[r]), static_cast<std::size_t>(counts[r])));
  return out;
#else
  throw std::logic_error("a cluster of more than one process in a build without MPI");
#endif
}

LocalWorkScope::LocalWorkScope() { ++local_scope_depth; }
LocalWorkScope::~LocalWorkScope() { --local_scope_depth; }

void distributed_for(std::size_t n, int threads, const std::function<void(std::size_t)>& body,
                     const std::function<std::string(std::size_t)>& encode,
                     const std::function<void(std::size_t, const std::string&)>& decode) {
  const Cluster& cluster = Cluster::world();
  const auto size = static_cast<std::size_t>(cluster.size());
  const auto rank = static_cast<std::size_t>(cluster.rank());
  auto checked_body = [&](std::size_t i) {
    fault_throw_point("distributed_item", i);
    body(i);
  };
  if (size == 1) {
    parallel_for(n, threads, checked_body);
    return;
  }
  const std::size_t owned = n > rank ? (n - rank + size - 1) / size : 0;
  spdlog::debug("rank {} of {}: {} of {} items", rank, size, owned, n);
  std::string message;
  try {
    parallel_for(owned, threads, [&](std::size_t k) { checked_body(rank + k * size); });
    ByteWriter w;
    w.put(Outcome::kOk);
    for (std::size_t k = 0; k < owned; ++k) w.put_string(encode(rank + k * size));
    message = w.release();
  } catch (...) {
    message = encode_error(std::current_exception());
  }
  const std::vector<std::string> all = cluster.all_gather(message);
  for (std::size_t r = 0; r < size; ++r) {
    ByteReader reader(all[r]);
    const auto kind = reader.get<Outcome>();
    if (kind != Outcome::kOk) rethrow_encoded(reader, kind, static_cast<int>(r));
  }
  for (std::size_t r = 0; r < size; ++r) {
    if (r == rank) continue;
    ByteReader reader(all[r]);
    reader.get<Outcome>();
    for (std::size_t i = r; i < n; i += size) decode(i, reader.get_string());
  }
}

}  // namespace rungcal
