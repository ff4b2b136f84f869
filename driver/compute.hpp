// One point, start to finish: circuit -> spectrum -> summary -> bounds ->
// record. Runs on one rank; never throws for a point's own failures (they
// become a status and a message in the record).
#pragma once
#include <mpi.h>

#include <exception>
#include <string>
#include <vector>

#include "config.hpp"
#include "record.hpp"
#include "spectrum.hpp"
#include "sweep.hpp"

namespace toral {

// The method a point will use, decided from the config alone (the same on
// every rank, before any circuit is built): the override, or for `auto`
// tangent for gates redrawn in time, bloch for clean periodic rings, dense up
// to spectrum.dense_max, krylov beyond.
Method planned_method(const Config& c, const Point& p);

// Methods that run collectively on a group of ranks.
inline bool distributed_method(Method m) { return m == Method::Krylov || m == Method::Tangent; }

// Ranks per distributed point: spectrum.krylov.ranks_per_point, or
// automatically about one rank per 250 000 matrix rows, raised to the
// largest request of the diagnostics (diagnostic_ranks); at most `world`.
int ranks_per_point(const Config& c, const std::vector<Point>& points, int world);

// Cuts of the /bounds blocks at a point, per region size ell of
// bounds.regions (block_cuts with bounds.placement; docs/bounds.md).
std::vector<std::int64_t> region_cuts(const Config& c, const Point& p);

// `group` is the communicator of a distributed point (MPI_COMM_SELF for the
// others); every rank of it must call with the same point. Only the record
// of the group's rank 0 is complete (the diagnostics keep only its output).
PointRecord compute_point(const Config& c, const ParamTable& t, const Point& p, MPI_Comm group = MPI_COMM_SELF);

// The status and message of a point whose computation threw `e`, by the
// exception's layer (kernels/errors.hpp): OverflowError -> overflow,
// InvalidInput (ModelError among them) -> invalid_model, SolverError ->
// solver_failed, anything else -> internal_error.
struct PointFailure {
  PointStatus status;
  std::string message;
};
PointFailure point_failure(const std::exception& e);

// A rough cost model (floating-point operations) used by `check`.
double estimated_flops(const Config& c, const Point& p);

}  // namespace toral
