// Localisation of one tangent (Lyapunov) vector on the lattice: per-site
// weights, inverse participation ratio, participation number, peak site and
// a localisation length from the exponential decay of the weights.
//
// Weights: w_i = (q_i^2 + p_i^2) / |v|^2 for site i (sum_i w_i = 1).
// IPR = sum_i w_i^2: 1 for a vector on one site, 1/L for equal weights; the
// participation number 1/IPR counts the sites the vector occupies (common
// practice in the physics of localisation; for Lyapunov vectors see Pikovsky &
// Politi, "Lyapunov Exponents", Cambridge 2016).
//
// Localisation length xi: for an exponentially localised vector the
// amplitude decays like |v_i| ~ exp(-d_i / xi), d_i the distance of site i
// from the peak site (the shorter way round on a ring), so
// ln w_i = c - (2 / xi) d_i. xi is -2 / s with s the ordinary least-squares
// slope of ln w_i against d_i over every site with w_i >= kWeightFloor (the
// tails below it are rounding: a Gram-Schmidt projection leaves an absolute
// error ~ eps |v| in every entry). Its error is the slope's standard error
// propagated, 2 se(s) / s^2 (residual scatter about the straight line; a
// profile that is not exponential shows up as a large error). A slope >= 0
// (weights that do not decay away from the peak: an extended vector) gives
// xi = +inf and xi_error = NaN; fewer than 3 sites above the floor, or a
// single distance, gives NaN for both.
#pragma once
#include <cstdint>
#include <vector>

namespace toral {

// |v_i| >= 1e-12 |v|: entries below are not resolved after re-orthonormalisation.
constexpr double kWeightFloor = 1e-24;

struct Localisation {
  std::vector<double> weight;  // w_i, L entries
  double ipr = 0.0;            // sum_i w_i^2
  double participation = 0.0;  // 1 / ipr (sites)
  std::int64_t peak = -1;      // site of the largest weight (the first one on ties)
  double xi = 0.0;             // localisation length (sites); +inf: not decaying
  double xi_error = 0.0;       // 2 se(slope) / slope^2
  std::int64_t fitted = 0;     // sites used in the fit (w_i >= kWeightFloor)
};

// v: 2L entries by toral coordinate (q_i = i, p_i = L + i), not all 0.
// ring: distances are taken the shorter way round (periodic boundary).
// Throws InvalidInput on a wrong size or a zero vector.
Localisation localisation(const std::vector<double>& v, std::int64_t L, bool ring);

}  // namespace toral
