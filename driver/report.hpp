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
void print_run_summary(MPI_Comm comm, const Config& c, const ParamTable& t,
                       const std::vector<PointRecord>& local, std::int64_t total, double seconds,
                       const std::string& output);

// One point as text, or as JSON keyed by the HDF5 dataset paths.
void print_point(std::ostream& os, const Config& c, const ParamTable& t, const Point& p,
                 const PointRecord& r, bool json);

// Validation summary: points per sweep, methods, rough cost.
void print_check(std::ostream& os, const Config& c);

}  // namespace toral
