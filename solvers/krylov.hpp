// Top Lyapunov exponents of a time-periodic circuit from the largest-modulus
// eigenvalues of its one-period operator, with SLEPc (distributed).
//
// What is diagonalised
//   * position-class circuits (S = M (+) M^-T): spec(S) = spec(M) u spec(M^-1)
//     (as moduli), but spec(M) alone is NOT closed under mu -> 1/mu for
//     general gates (random det +-1 gates on a ring of 10 sites: top exponent
//     2.07 for M, 1.17 for M^-1; numpy). So the top K exponents of S are the
//     top K of the merged lists of M and M^-1, both assembled exactly
//     (assemble.hpp). Each is first asked for ceil(K/2) values (enough when
//     spec(M) is closed under inversion, as for the two-shear family); an
//     operator whose smallest computed exponent still lies above the merged
//     K-th is asked again for K.
//   * other circuits: S itself (Interleaved layout), whose spectrum is +-
//     paired (symplectic): the top K moduli are the positive half.
//
// Stages
//   Krylov-Schur: EPSKRYLOVSCHUR, largest magnitude, on A^power (a MatShell of
//     the matrix-free layer operator, layers.hpp; power odd, default 5, so mu
//     and -mu never merge). The eigenpairs of A come from a Rayleigh-Ritz step
//     with A on the converged invariant subspace, each with its explicit
//     residual; pairs above tol are not accepted. (At L = 1e6 the cost is the
//     orthogonalisation of the Krylov basis: power 5 needed 3x fewer basis
//     vectors than power 1 for 1.8x more products on the disordered chain.)
//     On a layer operator A^power is one fused pass (layer_power_mult,
//     layers.hpp), bit-identical to power products.
//   Shift-invert: STSINVERT + KSPPREONLY + the distributed banded LU of
//     banded.hpp (si_solver Banded, default) or PCLU + MATSOLVERMUMPS
//     (Mumps; measured ~1 us per elimination-tree node per solve on these
//     chain matrices, ~100x slower). Targets: every direction in which the
//     preceding Krylov-Schur stage saw top eigenvalues: real targets
//     +-rho (1 + offset) (rho the largest modulus seen, or the Bloch bulk edge
//     for clean circuits) and, for estimates off the real axis (|Im| > 0.05
//     |mu|), complex targets sigma through the real operator
//     [(A - sigma)(A - conj sigma)]^-1 (complex banded LU, Rayleigh-Ritz on A).
//     A real target with an eigenvalue beyond it is moved out beyond the
//     largest found and the solve repeated (<= 3 times). offset = si_offset,
//     or by default 1e-8 for clean circuits (to separate a band-edge cluster)
//     and 1e-3 otherwise (A - sigma I stays well conditioned for the pairs
//     not nearest sigma). Estimates of the top K that no target reached are
//     reported as a warning in `message`.
//
// Policy (KrylovOptions::policy; spectrum.krylov.policy in the config)
//   Largest         the Krylov-Schur stage only; not converged -> ok = false.
//   ShiftInvert     a 3-restart plain Krylov-Schur probe (directions, size,
//                   outliers), then shift-invert.
//   Auto (default)  clean circuits (g.translation_invariant: the top is a
//                   band edge) go to ShiftInvert; disordered ones run the
//                   Krylov-Schur stage with max_it restarts and fall back to
//                   shift-invert (seeded by its estimates) when fewer than the
//                   requested values converged.
//   Refused (ok = false): clean periodic rings in Auto (near-continuum top;
//   bloch_spectrum is exact there) and circuits with time_periodic == false
//   (no one-period eigenproblem; use tangent_top).
//
// Defaults set before EPSSetFromOptions (which is called last, so the options
// database overrides them): EPS_NHEP, EPSKRYLOVSCHUR, nev as above, ncv =
// SLEPc's default (max(2 nev, nev + 15), capped at the dimension), max_it =
// KrylovOptions::max_it (every stage), EPS_CONV_REL, tolerance tol (0.01 tol
// on A^power, on the shift-invert stages and on complex targets, whose
// residuals are then re-checked on A), classical Gram-Schmidt refined only
// when a norm drops below 0.3 (BVSetOrthogonalization eta = 0.3 instead of
// SLEPc's 1/sqrt 2: orthogonality error ~ eps / 0.3, half the cost at
// L = 1e6; -toral_bv_orthog_eta restores it), a zero-mean Philox start vector
// keyed by toral coordinate (the same for any rank count; EPSSetInitialSpace).
// Options prefixes (options_prefix default "toral_"): "toral_" for the
// Krylov-Schur stage and the probe (-toral_eps_ncv 64, -toral_eps_monitor,
// -toral_bv_type mat), "toral_si_" for real-target shift-invert
// (-toral_si_eps_*, -toral_si_st_*, e.g. -toral_si_st_pc_type lu
// -toral_si_st_pc_factor_mat_solver_type mumps), "toral_sq_" for
// complex-target stages. options_prefix = "" gives plain -eps_* / -st_* for
// the Krylov-Schur stage.
//
// Diagnostics per point: the method actually used (KrylovMethod: KrylovSchur,
// or ShiftInvert when any operator needed it), converged count, iterations
// (restarts, all stages and operators), the largest relative residual
// ||A x - mu x|| / |mu| of the reported eigenpairs (explicit, on A), wall
// time, per-stage records, and the cluster report: how many of the computed
// eigenvalues of the operator holding lambda_max (a complex-conjugate pair
// counted once) lie within cluster_tol of lambda_max in exponent, and their
// spread. clustered = at least 2 such values: lambda_max is then a band edge
// and the values below it are finite-size artifacts; cluster_saturated =
// every computed value of that operator was inside (the cluster holds at
// least that many).
//
// Never throws for a point's own failure: errors (invalid gates, overflow,
// PETSc/LAPACK failures, no convergence) come back as ok = false + message,
// agreed on by every rank of comm.
#pragma once
#include <mpi.h>

#include <complex>
#include <cstdint>
#include <string>
#include <vector>

#include "assemble.hpp"
#include "model.hpp"

namespace toral {

// spectrum.krylov.policy ("auto" | "largest" | "shift_invert"), see Policy above.
enum class KrylovPolicy { Auto, Largest, ShiftInvert };
// The LU of the shift-invert stages: the banded solver (banded.hpp) or MUMPS.
enum class ShiftInvertSolver { Banded, Mumps };
// The method a KrylovResult came from: ShiftInvert when any operator needed it.
enum class KrylovMethod { KrylovSchur, ShiftInvert };

struct KrylovOptions {
  int nev = 6;              // K: top exponents of S wanted
  double tol = 1e-12;       // relative residual ||A x - mu x|| / |mu|
  int max_it = 100;         // restart budget of every EPS solve
  KrylovPolicy policy = KrylovPolicy::Auto;
  double cluster_tol = 1e-6;    // exponent distance from lambda_max counted as cluster
  int power = 5;            // Krylov-Schur stage runs on A^power (odd; 1 = plain A)
  ShiftInvertSolver si_solver = ShiftInvertSolver::Banded;  // LU of the shift-invert stages
  double si_offset = 0.0;  // sigma = s rho (1 + si_offset); 0: 1e-8 clean, 1e-3 otherwise
  std::string options_prefix = "toral_";
  std::int64_t t = 0;       // period whose operator is solved (time-periodic: any)
};

// One EPS solve (one operator, one stage), for diagnostics.
struct KrylovStage {
  std::string op;       // "S", "M", "M^-1"
  std::string method;   // "krylov-schur" | "shift-invert" | "probe"
  int power = 1;        // Krylov-Schur on A^power
  double target = 0.0;  // shift-invert target sigma (0 otherwise)
  std::int64_t requested = 0, converged = 0, iterations = 0;
  double max_residual = 0.0;
  std::string reason;   // SLEPc converged reason
};

struct KrylovResult {
  bool ok = false;
  std::string message;
  KrylovMethod method = KrylovMethod::KrylovSchur;  // ShiftInvert: any operator used SI
  std::vector<double> exponents;  // top K exponents of S, descending (positive half)
  std::vector<std::complex<double>> eigenvalues;  // the eigenvalue of S behind each exponent
  std::vector<std::string> source;                // operator it came from: "S", "M" or "M^-1"
  std::vector<double> residuals;                  // relative residual of each
  std::int64_t converged = 0;   // converged eigenpairs of the final solves (all operators)
  std::int64_t iterations = 0;  // restarts, all stages
  double max_residual = 0.0;    // largest relative residual of the reported values
  double wall_seconds = 0.0;
  // Cluster report at the top.
  double lambda_max = 0.0;
  bool clustered = false;
  std::int64_t cluster_count = 0;  // computed values within cluster_tol of lambda_max
  double cluster_spread = 0.0;     // lambda_max - smallest exponent in the cluster
  bool cluster_saturated = false;  // all computed values of that operator inside
  std::vector<KrylovStage> stages;
};

KrylovResult krylov_top(MPI_Comm comm, const GateSource& g, const KrylovOptions& o);

}  // namespace toral
