// Entanglement-growth quantities per point, for region sizes ell and local
// dimensions N. Pure functions of a point's Lyapunov data and lattice.
//
// Which are theorems (docs/bounds.md): the Hilbert-space cap
// min(ell, L - ell) ln N and the light-cone rate 2 c ln N of a region with c
// cuts bound every finite-N entropy. Lambda_ell is not a bound: it is the
// asymptotic entropy growth rate of a generic ell-site region of Gaussian
// states (Bianchi, Hackl & Yokomizo, JHEP 03 (2018) 025); a particular region
// can grow more slowly at late times, and faster at early times.
#pragma once
#include <cstdint>
#include <vector>

#include "model.hpp"

namespace toral {

// The rule for every ratio over a rate (slope_over_*, saturation times,
// the Ehrenfest time): x / rate for rate > 0; for a rate that is 0 (a rate
// <= 0 counts as 0: the rates toral divides by are non-negative by
// construction, so a negative one is rounding or a window's oscillation),
// +inf for x > 0, -inf for x < 0 (IEEE's x / +0) and NaN for x = 0; NaN when
// x or the rate is NaN.
double rate_ratio(double x, double rate);

// Boundary cuts of a block of ell contiguous sites: bonds of the brick-wall
// with exactly one end in the block. Periodic ring: 2 for 1 <= ell <= L - 1.
// Open chain with the block at an end (edge = true): 1. Open chain in the
// bulk (edge = false): 2 when the block fits strictly inside (ell <= L - 2),
// else 1 (ell = L - 1 touches an end). ell = L: 0. -1 for ell < 1 or ell > L
// (no such block).
std::int64_t block_cuts(std::int64_t L, Boundary boundary, bool edge, std::int64_t ell);

struct BoundsInput {
  std::int64_t L = 0;
  Boundary boundary = Boundary::Periodic;
  bool edge = false;        // open chains: blocks at an end (placement "edge") instead of the bulk
  std::vector<double> top;  // the largest exponents known, descending
  double lambda_max = 0.0;
  double ks_rate = 0.0;
};

struct Bounds {
  // all row-major [ell][N] where two axes apply; NaN where ell is not in 1..L-1
  std::vector<std::int64_t> cuts;            // [ell] block_cuts (-1 where no block of ell sites exists)
  std::vector<double> lyapunov_rate;         // [ell] Lambda_ell (asymptotic rate of a generic region)
  std::vector<double> hilbert_cap;           // [ell][N] theorem
  std::vector<double> lightcone_rate;        // [ell][N] 2 c_ell ln N, theorem
  std::vector<double> ehrenfest_time;        // [N] ln N / lambda_max
  std::vector<double> saturation_lyapunov;   // [ell][N] cap / Lambda_ell (rate_ratio)
  std::vector<double> saturation_lightcone;  // [ell][N] cap / lightcone_rate (rate_ratio)
};

// Lambda_ell, the asymptotic entropy growth rate of a generic ell-site region
// of a pure global state: the sum of the 2 min(ell, L - ell) largest exponents
// (NaN when fewer are known, and for ell outside 1..L-1).
double lyapunov_rate(const std::vector<double>& top, std::int64_t L, std::int64_t ell);

Bounds entanglement_bounds(const BoundsInput& in, const std::vector<std::int64_t>& ells,
                           const std::vector<std::int64_t>& Ns);

}  // namespace toral
