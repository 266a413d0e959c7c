// SPDX-License-Identifier: MIT
#pragma once

#include <cstddef>
#include <functional>
#include <string>
#include <vector>

namespace rungcal {

// The processes sharing one stage run: this process alone, or the ranks of an MPI launch
// (`mpirun -n N rungcal-<stage> ...`, in builds configured with RUNGCAL_MPI). Work split
// across ranks is gathered back to every rank in index order, so every rank holds the same
// result, bit for bit, as a single process would; only rank 0 writes files.
class Cluster {
 public:
  // The processes of this run. On the first call in a process an MPI launcher started
  // (Open MPI, MPICH or PMIx environment), MPI is initialised and finalised at exit; any
  // other process is a cluster of one. Inside a LocalWorkScope on this thread: always one.
  static const Cluster& world();

  int rank() const { return rank_; }
  int size() const { return size_; }
  bool writes_outputs() const { return rank_ == 0; }
  // Every rank's bytes, in rank order, on every rank. Every rank must call it, in the same
  // order, from the thread that initialised MPI.
  std::vector<std::string> all_gather(const std::string& mine) const;
  // True in builds with MPI support (whether or not this process was launched by MPI).
  static bool built_with_mpi();

 private:
  Cluster(int rank, int size) : rank_(rank), size_(size) {}
  int rank_ = 0;
  int size_ = 1;
};

// Work nested inside work already split across ranks (a grid variant's bootstrap) must not
// split again: within this scope, Cluster::world() on this thread is a cluster of one.
class LocalWorkScope {
 public:
  LocalWorkScope();
  ~LocalWorkScope();
  LocalWorkScope(const LocalWorkScope&) = delete;
  LocalWorkScope& operator=(const LocalWorkScope&) = delete;
};

// Calls body(i) for the indices i in [0, n) this rank owns (i mod size == rank, so
// neighbouring items, often alike in cost, go to different ranks) on `threads` workers;
// then every rank sends encode(i) of the items it owns and calls decode(i, bytes) for each
// item another rank made. An exception thrown by a body on any rank is rethrown on every
// rank (InputError keeps its rule and location), the lowest rank's first, so all ranks
// leave together instead of waiting for each other.
void distributed_for(std::size_t n, int threads, const std::function<void(std::size_t)>& body,
                     const std::function<std::string(std::size_t)>& encode,
                     const std::function<void(std::size_t, const std::string&)>& decode);

}  // namespace rungcal
