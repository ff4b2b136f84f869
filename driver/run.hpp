// MPI orchestration of a sweep: a dynamic task farm (rank 0 hands out points,
// largest estimated cost first, and computes too), a journal of finished
// points, periodic checkpoints of the result file, signals, resume, shards.
#pragma once
#include <mpi.h>

#include <string>

#include "config.hpp"

namespace toral {

// Exit code of a run stopped by SIGTERM/SIGUSR1/SIGINT: the result file holds
// a valid checkpoint, the journal every finished point; `run --resume` on
// the same config and file finishes it.
constexpr int kExitInterrupted = 3;

struct RunOptions {
  std::string output;
  bool overwrite = false;
  bool quiet = false;
  bool resume = false;
  std::int64_t shard_index = 0, shard_count = 1;  // --shard i/n: points with index % n == i
  double checkpoint_seconds = 60.0;  // rewrite the result file with the points so far
  double progress_seconds = -1.0;    // < 0: 0.5 s on a terminal (one updating line), 30 s in logs
};

struct RunOutcome {
  std::int64_t points = 0;     // points of this run (its shard)
  std::int64_t computed = 0;   // computed now (not taken from a journal or file)
  std::int64_t failed = 0;
  double seconds = 0.0;
  bool interrupted = false;
};

// Collective over `comm`. Throws ConfigError for a refused resume (different
// config, stray journal) and std::runtime_error on I/O failure. On a signal
// rank 0 writes a checkpoint and every rank ends the process with
// kExitInterrupted (it does not return).
RunOutcome run_sweep(MPI_Comm comm, const Config& c, const RunOptions& o);

// Hex FNV-1a-64 of the config text: the identity checked by resume and merge.
std::string config_hash(const Config& c);

// Installs the SIGTERM/SIGUSR1/SIGINT handlers that stop a run.
void install_stop_handlers();

}  // namespace toral
