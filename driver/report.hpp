// Human-facing output: the end-of-run summary table, `point` and `check`.
#pragma once
#include <mpi.h>

#include <ostream>
#include <vector>

#include "config.hpp"
#include "record.hpp"
#include "sweep.hpp"

namespace toral {

// Collective: rank 0 gathers per-point values and prints one row per sweep.
// `busy` is the seconds this rank spent computing points in this run; the
// summary reports the load balance sum(busy) / (ranks x seconds).
void print_run_summary(MPI_Comm comm, const Config& c, const ParamTable& t,
                       const std::vector<PointRecord>& local, std::int64_t total, double seconds,
                       const std::string& output, double busy);

// One point as text, or as JSON keyed by the HDF5 dataset paths.
void print_point(std::ostream& os, const Config& c, const ParamTable& t, const Point& p,
                 const PointRecord& r, bool json);

// Validation summary: points per sweep and size, methods, time and memory per
// point from a short calibrated probe, totals. Throws ConfigError when a
// point needs more than `memory_gb` GiB (the memory of one rank).
void print_check(std::ostream& os, const Config& c, double memory_gb);

}  // namespace toral
