// Matrix-free one-period operators: a PETSc MatShell that applies the
// brick-wall layers of a GateSource directly (y = O (E x) for M, and so on),
// never forming the product. Same rows, ownership and layout as
// assemble_distributed (site order for M-type operators, Interleaved for S),
// so its vectors work with the assembled matrix too.
//
// One application: a halo exchange of the first/last two sites with the
// neighbouring ranks (MPI_Sendrecv; a ring wraps, P = 1 rings exchange with
// themselves), then the first layer on the owned sites plus one halo site on
// each side, the second layer on the owned sites, and the one-site layer.
// Memory: the gates of the owned bonds as doubles (32 B per site and layer
// for M-type, 128 B for S) and one work vector.
//
// Used for the Krylov-Schur stage (powers of the operator, krylov.cpp) and by
// the tangent method (tangent.cpp), where the gates of redrawn circuits are
// replaced every period with layer_operator_set_period (no re-assembly).
// Needs every rank to own at least 2 sites (SolverError otherwise).
#pragma once
#include <mpi.h>

#include <cstdint>

#include "assemble.hpp"

namespace toral {

// A DistMatrix whose A is the MatShell. Collective; gates are validated
// (ModelError on every rank, as for assembly).
DistMatrix make_layer_operator(MPI_Comm comm, const GateSource& g, std::int64_t t, Operator op);

// y = A^p x for an operator A made by make_layer_operator, in one pass over
// memory: tiles of 2048 sites are carried through all p applications while
// they sit in cache (halos of 2p sites from the neighbouring ranks), the same
// result to the bit as p MatMults at ~1/p of their memory traffic.
// layer_power_available (collective) says whether it applies: A a layer
// operator without a one-site layer, 2 <= p <= 16, every rank owning >= 2p
// sites; otherwise use p MatMults.
bool layer_power_available(Mat A, int p);
PetscErrorCode layer_power_mult(Mat A, int p, Vec x, Vec y);

// Re-reads the gates of period t into an operator made by make_layer_operator
// (for circuits whose gates are redrawn every period). Collective.
void layer_operator_set_period(const DistMatrix& d, const GateSource& g, std::int64_t t);

}  // namespace toral
