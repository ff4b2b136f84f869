// `toral jobscript`: a ready batch script (Slurm or PBS) for a config, with
// array shards, a signal before the walltime and a requeue-and-resume step.
#pragma once
#include <cstdint>
#include <string>

namespace toral {

struct JobscriptOptions {
  std::string scheduler = "slurm";  // slurm | pbs
  std::string config;               // config path as the job will see it
  std::string output;               // result file (shards get .shardIofN.h5)
  std::string toral = "toral";      // the binary
  std::string job_name = "toral";
  std::string partition;            // Slurm partition or PBS queue
  std::string account;
  std::int64_t ranks = 16;
  std::string walltime = "01:00:00";  // [D-]HH:MM:SS
  std::int64_t shards = 1;            // > 1: an array job, one shard per task
  std::int64_t signal_lead = 300;     // seconds before the walltime to send SIGTERM
  double checkpoint = 300;            // seconds between checkpoints
};

// Walltime in seconds; throws ConfigError naming the option for a bad value.
std::int64_t walltime_seconds(const std::string& w);

// Quotes a string for bash (single quotes; embedded quotes escaped).
std::string shell_quote(const std::string& s);

// The script text. Throws ConfigError for values that cannot be written
// safely (names outside [A-Za-z0-9._-], a lead longer than the walltime, ...).
std::string make_jobscript(const JobscriptOptions& o);

}  // namespace toral
