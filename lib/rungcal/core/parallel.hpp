// SPDX-License-Identifier: MIT
#pragma once

#include <cstddef>
#include <functional>

namespace rungcal {

// Worker threads for `requested` (0 = every core the machine reports, at least one, shared
// out between the MPI ranks an MPI launcher started on this machine).
int worker_threads(int requested);

// Calls body(i) for i in [0, n) on `threads` workers that take the next index as they
// finish (stars and resamples differ in cost). Results a caller stores by index come out
// the same for any thread count. The first exception a body throws stops the hand-out of
// new indices and is rethrown here once every worker has stopped.
void parallel_for(std::size_t n, int threads, const std::function<void(std::size_t)>& body);

}  // namespace rungcal
