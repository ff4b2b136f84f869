// The toral result file: layout version 1 (docs/layout.md is the contract).
#pragma once
// The deprecated MPI C++ bindings are not used; skipping them also avoids
// their -Wextra warnings.
#ifndef OMPI_SKIP_MPICXX
#define OMPI_SKIP_MPICXX 1
#endif
#ifndef MPICH_SKIP_MPICXX
#define MPICH_SKIP_MPICXX 1
#endif
#include <mpi.h>

#include <cstdint>
#include <stdexcept>
#include <string>
#include <vector>

#include "record.hpp"

namespace toral {

// Layout version written as the root attribute `layout_version`. Bumped on
// every incompatible change of docs/layout.md.
constexpr std::int64_t kLayoutVersion = 1;

// Fixed byte size of each /points/message entry (longer messages are
// truncated on a UTF-8 boundary to kMessageBytes - 1 bytes).
constexpr std::size_t kMessageBytes = 256;

// Any failure of write_results / check_output_target other than HDF5's own
// (those are h5::Error). Thrown on every rank with the same message.
struct ResultFileError : std::runtime_error {
  using std::runtime_error::runtime_error;
};

// The output path exists and overwrite was not requested.
struct OutputExistsError : ResultFileError {
  using ResultFileError::ResultFileError;
};

// True if something (file, directory, dangling link) exists at `path`.
// Local, not collective.
bool output_exists(const std::string& path);

// Collective on `comm`. Rank 0 checks that `path` can be produced: its
// directory exists and is writable, `path` is not a directory, and `path`
// does not exist unless `overwrite`. Throws OutputExistsError /
// ResultFileError on every rank with the same message. Call it before a long
// computation; write_results repeats it.
void check_output_target(MPI_Comm comm, const std::string& path, bool overwrite);

// Collective on `comm`. Writes the result file of a run of `total_points`
// points. Each rank passes the records it computed (any subset, any order);
// over all ranks the indices must cover 0 .. total_points-1 exactly once.
// Axes and meta are taken from rank 0 (broadcast), so they need only be
// filled correctly there; total_points must agree on all ranks.
//
// The file is written to a sibling temporary `path + ".partial.<id>"` and
// renamed onto `path` by rank 0 only after it was closed successfully. An
// existing `path` is never opened; without `overwrite` the call refuses
// (OutputExistsError) before any work, and the final rename also refuses to
// replace a file that appeared in the meantime. On failure the temporary is
// removed and the same exception is thrown on every rank (except for HDF5
// failures that hit only some ranks inside a collective call; those are
// reported by the ranks that see them).
//
// The dataset contents depend only on the records, not on the number of
// ranks or the distribution.
void write_results(MPI_Comm comm, const std::string& path, bool overwrite, const RunAxes& axes,
                   const RunMeta& meta, std::int64_t total_points,
                   const std::vector<PointRecord>& local);

// ISO 8601 UTC time of now, e.g. "2024-05-01T12:34:56Z" (for RunMeta::created).
std::string iso8601_utc_now();

// Labels of /points/status codes and /points/method values, indexed by value.
const std::vector<std::string>& status_labels();
const std::vector<std::string>& method_labels();

}  // namespace toral
