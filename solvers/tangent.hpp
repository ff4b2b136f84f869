// Top Lyapunov exponents by the QR (Benettin) method, distributed: k tangent
// vectors are propagated through the circuit period by period and
// re-orthonormalised (SLEPc BVOrthogonalize, V = Q R) after every period;
// lambda_j = (1/T) sum_t ln|R_jj(t)|. Works for circuits whose gates are
// redrawn every period (GateSource::time_periodic == false): period t applies
// the gates g.bond(b, t), g.site(i, t), t = t0, t0 + 1, ...
//
// Operators: S for general circuits (Interleaved layout); for position-class
// circuits S = M (+) M^-T splits, and the top exponents of S are the top of
// the exponents of the M-cocycle and of the M^-T-cocycle (the momentum
// block). The two are run side by side with k vectors each (k <= L) and
// merged. (Applying M alone is not enough in general: spec(M) is not closed
// under inversion for general gates, see krylov.hpp.) The products are
// matrix-free (layers.hpp) when every rank owns at least 2 sites, else the
// period's matrix is assembled (assemble.hpp).
//
// Error estimate: the T measured periods (after `transient` discarded ones)
// are cut into `windows` equal windows; the error of lambda_j is the standard
// error of its window means, sqrt(sum_w (m_w - lambda_j)^2 / (W (W - 1))).
// (For time-periodic circuits the window means converge exponentially to
// ln|mu_j| once the vectors have aligned, so the estimate mostly measures the
// oscillation of complex pairs; the transient must cover the alignment, i.e.
// several times 1 / (lambda_k - lambda_{k+1}) periods. Degenerate moduli and
// Jordan blocks converge like log T / T, which the standard error misses and
// `drift` shows.)
//
// Initial vectors: column j has entries 2u - 1, u uniform in [0, 1) from
// Philox4x64-10 (Random123) keyed by (seed, "toral-tangent") with counter
// (toral coordinate, j): independent of the rank count and the layout.
// Reproducibility across rank counts is NOT bit-for-bit: the reductions in
// the orthonormalisation (MPI_Allreduce of partial dot products) sum in an
// order that depends on the partition, so 1 and 2 ranks agree to rounding
// (measured differences ~1e-15 relative; tests allow 1e-11).
//
// Options database: the BVs take the prefix `options_prefix` (default
// "toral_tangent_"), e.g. -toral_tangent_bv_orthog_type mgs, and are
// configured with BVSetFromOptions after the defaults (BVSVEC, classical
// Gram-Schmidt with refinement if needed, block Gram-Schmidt).
//
// Never throws for a point's own failure: ok = false + message.
#pragma once
#include <mpi.h>

#include <cstdint>
#include <string>
#include <vector>

#include "model.hpp"

namespace toral {

struct TangentOptions {
  int k = 8;                      // top exponents of S wanted
  std::int64_t periods = 2000;    // measured periods T
  std::int64_t transient = 200;   // periods discarded before measuring
  int windows = 20;               // windows for the error estimate (>= 2)
  std::uint64_t seed = 0;         // initial vectors
  std::int64_t t0 = 0;            // period index of the first period applied
  std::string options_prefix = "toral_tangent_";
};

struct TangentResult {
  bool ok = false;
  std::string message;
  std::vector<double> exponents;  // top k of S, descending
  std::vector<double> errors;     // standard error of the window means, per exponent
  // |mean of the second half of the windows - mean of the first half|: a
  // slow alignment or a Jordan block (exponents converging like log T / T)
  // shows up here even when the window means scatter little.
  std::vector<double> drift;
  std::vector<std::string> source;  // "S", "M" or "M^-T" (position class)
  double max_error = 0.0;
  std::int64_t periods = 0;       // measured periods actually used (windows * window length)
  int windows = 0;
  double wall_seconds = 0.0;
};

TangentResult tangent_top(MPI_Comm comm, const GateSource& g, const TangentOptions& o);

}  // namespace toral
