// Declarations shared by the pieces of the result file code (internal to
// io/, not part of the public io/result_file.hpp): result_validate.cpp
// (validation of records and stats) and result_write.cpp (the writer and
// write_results).
#pragma once
#include <cstdint>
#include <string>
#include <vector>

#include "result_file.hpp"

namespace toral::result_detail {

// ---------------------------------------------------------------- MPI helpers

inline int comm_rank(MPI_Comm c) {
  int r = 0;
  MPI_Comm_rank(c, &r);
  return r;
}
inline int comm_size(MPI_Comm c) {
  int s = 1;
  MPI_Comm_size(c, &s);
  return s;
}

// The row a record goes to.
inline std::int64_t row_of(const PointRecord& r) { return r.row == -1 ? r.index : r.row; }

// ---------------------------------------------------------------- validation (result_validate.cpp)

// Rank-local validation of the records (sorted by row) against the axes.
// `whole`: a whole-run file, where row must equal index.
std::string validate(const std::vector<const PointRecord*>& recs, const RunAxes& ax,
                     std::int64_t rows, std::int64_t total, bool whole);

// Collective: the global indices are unique over all ranks. Each (index,
// row) pair goes to rank index % size, which looks for repeats. Returns
// this rank's finding (empty when none).
std::string duplicate_index(MPI_Comm comm, const std::vector<const PointRecord*>& recs);

// Validation of (rank 0's, broadcast) stats; identical on every rank.
std::string validate_stats(const EnsembleStats& st);

}  // namespace toral::result_detail
