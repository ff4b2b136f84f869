// MPI orchestration of a sweep: points shared among ranks, progress on rank 0,
// one collective write of the records at the end.
#pragma once
#include <mpi.h>

#include <string>

#include "config.hpp"

namespace toral {

struct RunOptions {
  std::string output;
  bool overwrite = false;
  bool quiet = false;
};

struct RunOutcome {
  std::int64_t points = 0;
  std::int64_t failed = 0;
  double seconds = 0.0;
};

// Collective over `comm`. Point i goes to rank i mod size (static cyclic
// distribution). Throws std::runtime_error on I/O failure.
RunOutcome run_sweep(MPI_Comm comm, const Config& c, const RunOptions& o);

}  // namespace toral
