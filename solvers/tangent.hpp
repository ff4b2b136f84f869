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
// Exponent: the plain mean lambda_j = (1/T) sum_t ln|R_jj(t)| over the T
// measured periods (after `transient` = tau discarded ones).
//
// Error estimate (`errors`, stored as /chaos/exponent_error): the T periods
// are cut into W = `windows` equal windows with means m_w; per exponent
//   err_j^2 = SE_j^2 + (g D_j)^2 + s_j^2 + (256 eps max(1, |lambda_j|))^2,
//   SE_j = sqrt(sum_w (m_w - lambda_j)^2 / (W (W - 1)))  (window scatter),
//   D_j  = |mean of the last floor(W/2) windows - mean of the first|  (`drift`),
//   s_j  = half the spread of the estimates within 2 / (tau + T) of lambda_j.
// Bias. Over periods 0..t-1 the sum of ln|R_jj| is lambda_j t + c_j(t), with
// c_j the orientation of the tangent frame against the Oseledets (for
// time-periodic circuits: eigen-) directions. c_j converges like
// exp(-gap t) for a modulus `gap` away from its neighbours, stays bounded but
// oscillates for complex pairs and equal moduli, and grows like (m - 1) ln t
// inside an m x m Jordan block (common here: shears make Jordan blocks, on
// the unit circle too). The plain mean is off by (c_j(tau + T) - c_j(tau)) / T,
// an O(1/T) bias (log T / T for Jordan blocks) that the window scatter does
// not see once c_j varies slowly across the windows. Two models of it:
//  - a deviation b/T of a mean over T periods (alignment done early): the
//    second-half mean is the first-order Richardson extrapolation
//    2 lambda(T) - lambda(T/2), and the plain mean's bias is D/2;
//  - window means approaching lambda like a / t, t counted from the initial
//    vectors (a Jordan block): the bias is g D with
//    g = [ln((tau + T) / tau) / T] / [(ln((tau + h) / tau)
//        - ln((tau + T) / (tau + T - h))) / h], h the halves' length;
//    g = 1.01 at the defaults (T = 10 tau), 2.94 at tau = T, ~ 2 tau / T for
//    tau >> T.
// err uses g D with g = max(1, g(tau, T)) for time-periodic circuits and
// g = 1 for redrawn ones (no Jordan blocks): at least twice the Richardson
// estimate. (sqrt(SE^2 + (D/2)^2) left 4.8 % of the non-zero and 44 % of
// the zero exponents outside +-2 of it at T = 1000.) For redrawn gates the
// window means are independent, D scatters with standard deviation 2 SE,
// and err is about 1.7 SE (median): conservative there.
// Unresolved neighbours (s): moduli closer than about 1 / (tau + T) are not
// resolved in the run (the frame aligns with them on a time scale 1 / gap);
// the sum over such a group is right but not its split, which drifts too
// slowly for the windows or the halves to see. s is 0 for an isolated
// exponent and at most 2 / (tau + T).
// Rounding: where the frame has converged to the last bit the window means
// agree exactly and SE = D = 0, while the mean keeps the rounding of one
// period's ln|R_jj|: measured at most 132 eps max(1, |lambda|) against exact
// characteristic-polynomial roots (L <= 16).
// Coverage, measured (docs/model.md, "Accuracy of the tangent method"):
// over 520 frozen shear2 rings, chains and cat-kicked lattices (L = 8..16),
// all 2L exponents against exact roots, T = 500..4000, tau = 0..2000,
// W = 10..50: at most 0.08 % of the non-zero and 0.25 % of the zero
// exponents outside +-2 err (SE alone: up to 8 % and 53 %, with 1e-12
// allowed for rounding); redrawn gates against runs 200 times longer:
// 1.6 % (SE alone: 6.0 %). tests/test_tangent_coverage.cpp checks the
// frozen figure (docs/model.md states at most 1 %).
// The stored exponent stays the plain mean: the second-half mean has less
// bias but sqrt(2) more scatter, and was not better overall (for the
// non-zero exponents at the defaults a larger 90th-percentile error, 4.6e-4
// against 2.3e-4, though a smaller median and 99th percentile).
// Limits: a group of equal moduli cut by k (the k-th and (k+1)-th) is not
// seen by s; ask for a few more exponents than needed.
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
  // Gather the final orthonormal tangent vector of each of the top k
  // exponents on rank 0 (TangentResult::vectors); off by default.
  bool keep_vectors = false;
};

struct TangentResult {
  bool ok = false;
  std::string message;
  std::vector<double> exponents;  // top k of S, descending
  std::vector<double> errors;     // err_j above: scatter, bias, unresolved neighbours, rounding
  std::vector<double> standard_errors;  // SE_j: standard error of the window means alone
  // D_j = |mean of the second half of the windows - mean of the first half|,
  // before the factor g: a slow alignment or a Jordan block (exponents
  // converging like log T / T) shows up here even when the windows scatter
  // little.
  std::vector<double> drift;
  std::vector<std::string> source;  // "S", "M" or "M^-T" (position class)
  double max_error = 0.0;         // max_j err_j
  std::int64_t periods = 0;       // measured periods actually used (windows * window length)
  int windows = 0;
  double wall_seconds = 0.0;
  // The window means m_w of each of the top k exponents, [window][j], in the
  // order of `exponents`: finite-time exponents over the window length
  // periods / windows.
  std::vector<std::vector<double>> window_means;
  // keep_vectors only, on rank 0 (empty elsewhere): the final tangent vector
  // (column j of the orthonormal frame Q after the last period) of each of
  // the top k exponents, by toral coordinate (q_i = i, p_i = L + i; 2L
  // entries). For position-class circuits a vector of the M-cocycle has its
  // p part 0 and one of the M^-T-cocycle its q part 0. Unit norm.
  std::vector<std::vector<double>> vectors;
};

TangentResult tangent_top(MPI_Comm comm, const GateSource& g, const TangentOptions& o);

}  // namespace toral
