// Distributed assembly of one-period operators of a brick-wall circuit as
// PETSc MATAIJ matrices (MPIAIJ on several ranks, SeqAIJ on one), straight
// from a GateSource.
//
// Each rank builds only the rows it owns. A row of S = S_site S_odd S_even is
// e_r^T S_site S_odd S_even: the site gate of row r's site picks at most 2
// coordinates, the odd bond touching each of them at most 4, the even bonds
// at most 8 (a row of S has at most 8 non-zeros; a row of M at most 4). The
// entries are exact int64 products of the gates touching that row (checked
// arithmetic), so no layer matrices, no MatMatMult, no dense intermediates and
// no communication besides PETSc's own setup. Preallocation is exact: the
// matrix is created from the local CSR rows (Mat*AIJSetPreallocationCSR).
// Every row also stores its diagonal (an explicit 0 where the entry is
// zero), so shifted copies A - sigma I need no new non-zeros; gather_to_root
// drops explicit zeros.
//
// Ownership: a contiguous block split identical to PetscSplitOwnership,
// over sites for site-ordered operators (M, M^-1, M^-T; S in the Interleaved
// layout, 2 rows per site) and over the 2L rows of S in the Global layout.
//
// Limits: PETSc here uses 32-bit PetscInt, so the global dimension must be
// at most 2^31 - 1 (L <= 2147483647 for M, L <= 1073741823 for S); beyond
// that assembly throws SolverError ("... exceeds the 32-bit PetscInt
// limit ...") before any work. Entries are stored as doubles; an entry above
// 2^53 in magnitude (not exactly representable) is also a SolverError,
// and an int64 overflow while multiplying gates an OverflowError. Invalid
// gates throw ModelError. All of these are raised on every rank of the
// communicator (collectively), so callers may catch them without deadlock.
#pragma once
#include <mpi.h>
#include <petscmat.h>

#include <cstdint>

#include "model.hpp"
#include "petsc_util.hpp"

namespace toral {

// Which one-period operator to assemble (period t of the GateSource).
enum class Operator {
  S,          // 2L x 2L: S = S_site S_odd S_even (any circuit)
  M,          // L x L position block M = M_odd M_even (position-class only)
  MInverse,   // M^-1 = M_even^-1 M_odd^-1 (exact: gates have det +-1)
  MInverseT,  // M^-T = M_odd^-T M_even^-T, the momentum block of S = M (+) M^-T
};
const char* operator_name(Operator op);

// Row/column order of the distributed matrix.
//  Global:      toral's order (q_0..q_{L-1}, p_0..p_{L-1}) for S; site order for M.
//  Interleaved: (q_0, p_0, q_1, p_1, ...) for S, i.e. P S P^T for a permutation
//               P: the same spectrum, and each rank owns whole sites, so a
//               matrix-vector product only communicates at block edges. For
//               M-type operators Interleaved is the same as Global.
enum class Layout { Global = 0, Interleaved = 1 };

// A distributed operator and the map between its rows and toral coordinates.
struct DistMatrix {
  UniqueMat A;
  Operator op = Operator::S;
  Layout layout = Layout::Global;
  std::int64_t L = 0;
  PetscInt n = 0;                  // global dimension (L or 2L)
  PetscInt row_begin = 0, row_end = 0;  // rows owned by this rank
  Mat mat() const { return A.get(); }
  // toral coordinate (q_i = i, p_i = L + i; site i for M-type) of a matrix row/column.
  std::int64_t coordinate(PetscInt row) const;
  // The matrix row/column of a toral coordinate.
  PetscInt index(std::int64_t coordinate) const;
};

// Throws SolverError (kernels/errors.hpp) when a global dimension n does not fit PetscInt.
void check_index_limit(std::int64_t n, const char* what);

// Assembles `op` for period t (t is passed to g.bond / g.site; time-periodic
// sources ignore it). Collective on comm.
DistMatrix assemble_distributed(MPI_Comm comm, const GateSource& g, std::int64_t t, Operator op,
                                Layout layout = Layout::Global);

// Convenience: S in the given layout, or M of a position-class circuit.
inline DistMatrix assemble_period_mpi(MPI_Comm comm, const GateSource& g, std::int64_t t = 0,
                                      Layout layout = Layout::Global) {
  return assemble_distributed(comm, g, t, Operator::S, layout);
}
inline DistMatrix assemble_position_block_mpi(MPI_Comm comm, const GateSource& g,
                                              std::int64_t t = 0) {
  return assemble_distributed(comm, g, t, Operator::M, Layout::Global);
}

// Gathers a distributed operator to `root` as a SparseInt in toral's global
// order (rows and columns sorted, explicit zeros dropped), for tests and
// small reference checks. Throws if an entry is not an exact integer. Other
// ranks get an empty SparseInt (n = 0). Collective on the matrix's comm.
SparseInt gather_to_root(const DistMatrix& d, int root = 0);

}  // namespace toral
