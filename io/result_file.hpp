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

#include "common.hpp"
#include "record.hpp"

namespace toral {

// Layout version written as the root attribute `layout_version`. Bumped on
// every incompatible change of docs/layout.md.
// 2: /bounds/cuts per region size (P, nl), /bounds/lightcone_rate (P, nl, nN).
constexpr std::int64_t kLayoutVersion = 3;

// Fixed byte size of each /points/message entry (longer messages are
// truncated on a UTF-8 boundary to kMessageBytes - 1 bytes).
constexpr std::size_t kMessageBytes = 256;

// ResultFileError (common.hpp): any failure of write_results /
// check_output_target other than HDF5's own (those are h5::Error), thrown on
// every rank with the same message; also every failure of read_results.

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

// Collective on `comm`. Writes a result file of `rows` rows. Each rank
// passes the records it holds (any subset, any order). A record goes to row
// `row` of the file (row = -1 means row = index); over all ranks the rows
// must cover 0 .. rows-1 exactly once, and the global point indices `index`
// must be unique and lie in 0 .. total_points-1 (total_points =
// meta.total_points, or `rows` when that is 0). A file with shard = "" and
// total_points = rows is a whole run: there row must equal index.
// Axes, meta and stats are taken from rank 0 (broadcast), so they need only
// be filled correctly there (other ranks may pass nullptr stats); `rows`
// must agree on all ranks. An empty meta.config_hash is filled with
// config_hash_of(meta.config_text).
//
// `stats` (rank 0's), when non-null with at least one group, is written as
// /stats (docs/layout.md). Column names must be unique, not "count", not a
// stats parameter name and contain no '/'; every array must have the
// documented length.
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
                   const RunMeta& meta, std::int64_t rows, const std::vector<PointRecord>& local,
                   const EnsembleStats* stats = nullptr);

// Everything read_results gets back from a file.
struct ResultData {
  RunAxes axes;   // param_meanings from each /points/<name> "meaning" attribute
  RunMeta meta;   // for files without the newer attributes: config_hash "",
                  // total_points = rows, shard ""
  std::int64_t rows = 0;              // root attribute point_count
  std::vector<PointRecord> records;   // in row order; records[i].row == i
  EnsembleStats stats;                // groups() == 0 when the file has no /stats
};

// Serial (no MPI needed; plain sec2 file access). Reads a layout-2 result
// file back. Validates that it is a toral file (root attributes
// toral_version, layout_version == 2, every layout-2 dataset present with
// consistent shapes; /entanglement is optional) and throws ResultFileError with a one-line message
// naming the file otherwise ("not a toral result file", "unsupported layout
// version", "missing dataset /x/y", "corrupt: ..."). HDF5's automatic error
// printing is off while it runs.
//
// The records are those written, field by field, with these exceptions that
// the file cannot tell apart: `row` is the actual row (never -1); exponents
// and exponent_errors are cut to /chaos/exponent_count entries;
// exponent_errors and the fixed-width vectors (histograms, bounds) come back
// empty where the file row is all NaN; messages are truncated to
// kMessageBytes - 1 bytes; `index` is the row for files without
// /points/index; entanglement int64 rows that are all -1 come back empty and
// profile rows are cut to the point's width L + 1. Objects added by later
// toral versions are ignored.
ResultData read_results(const std::string& path);

// ISO 8601 UTC time of now, e.g. "2024-05-01T12:34:56Z" (for RunMeta::created).
std::string iso8601_utc_now();

// Labels of /points/status codes, /points/method values and
// /chaos/solver/method values, indexed by value.
const std::vector<std::string>& status_labels();
const std::vector<std::string>& method_labels();
const std::vector<std::string>& solver_labels();

}  // namespace toral
