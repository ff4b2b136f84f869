// A distributed direct solver for (cyclically) banded matrices, used as the
// LU of the shift-and-invert stage (krylov.cpp).
//
// Why not MUMPS: the one-period operators of a brick-wall chain are banded
// (half-bandwidth 2 for M in site order, 5 for S interleaved; rings add
// corner blocks). MUMPS's elimination tree for them has ~0.7 n nodes with
// fronts of size <= 4 and its solve phase costs about 1 us per node: 75 ms per
// solve at n = 1e5 on one rank and ~400 ms on two (measured on the development
// machine), so a shift-invert solve at L = 1e5 took ~100 s. This solver costs
// O(n b^2 / P) per factorisation and O(n b / P) per solve.
//
// Method (a partition / SPIKE scheme with exact reduced system): rank p owns
// the contiguous rows [r_p, r_{p+1}) (the matrix's own ownership), with the
// diagonal block A_p (banded, LAPACK dgbtrf with partial pivoting), B_p (its
// last b rows coupled to the first b columns of the next block) and C_p (its
// first b rows coupled to the last b columns of the previous block; next and
// previous are cyclic, so rings and P = 1 rings need nothing special). With
// the spikes V_p = A_p^-1 [0; B_p] and W_p = A_p^-1 [C_p; 0], the top b and
// bottom b unknowns of every block satisfy a reduced system of size 2bP,
// which every rank assembles (MPI_Allgather of 4 b x b blocks) and factors
// densely (LAPACK dgetrf). A solve is one banded solve per rank, an
// MPI_Allgather of 2b values per rank, a small dense solve and a local
// update x_p = g_p - V_p t_{p+1} - W_p d_{p-1}.
//
// Requirements (checked, SolverError otherwise): every entry within
// cyclic distance b of the diagonal with b the same on all ranks, every rank
// owning at least 2b rows, and 2bP <= 8192 (the dense reduced system; beyond,
// use -<prefix>st_pc_type lu with a parallel factorisation package).
// Pivoting is only inside each block; a block that is exactly singular is
// reported as an error. Accuracy is checked by the eigen-solver's residuals.
#pragma once
#include <petscmat.h>
#include <petscpc.h>

#include <complex>

namespace toral {

// Turns `pc` into the banded solver (a PCSHELL named "toral-banded"). Its
// set-up reads the preconditioning matrix (an assembled AIJ matrix, e.g. the
// A - sigma I built by STSINVERT) with MatGetRow.
PetscErrorCode pc_set_banded(PC pc);

// A complex target sigma (Im sigma != 0) in real arithmetic: the MatShell
//   y = Im[(A - sigma I)^-1 x] / Im(sigma) = [(A - sigma I)(A - conj(sigma) I)]^-1 x
// for real x (A real), through one complex banded factorisation of
// A - sigma I (same scheme as above, LAPACK zgbtrf). Its eigenvalues are
// 1 / ((mu - sigma)(mu - conj sigma)): the largest belong to the eigenvalues
// mu of A nearest sigma and conj(sigma). Collective; throws
// SolverError on a failure (on every rank).
PetscErrorCode make_quadratic_inverse(Mat A, std::complex<double> sigma, Mat* shell);

}  // namespace toral
