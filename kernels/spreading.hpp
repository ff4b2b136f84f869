// Exact spreading of a localised perturbation: x_t = S_{t-1} ... S_1 S_0 e,
// with e the unit vector of one coordinate (q or p of one site) and S_t the
// period matrix of period t (the same every period for time-periodic
// circuits). The entries of x_t are integers, held exactly (FLINT fmpz), so
// their logarithms are exact at any t: floating point would lose the front
// once e^{lambda t} passes 10^16. The amplitude at site i is
// a_t(i) = max(|q_i|, |p_i|) of x_t, and ln a_t(j + v t) / t is the growth
// rate along the ray x = j + v t (velocity-dependent Lyapunov exponent,
// Deissler & Kaneko, Phys. Lett. A 119 (1987) 397) measured at time t.
#pragma once
#include <cstdint>
#include <vector>

#include "model.hpp"

namespace toral {

struct SpreadProfile {
  std::int64_t L = 0;
  std::vector<std::int64_t> t;   // the times kept: 0, stride, 2 stride, ..., and T
  std::vector<double> log_amp;   // t.size() x L, row-major: ln a_t(i); -inf where a_t(i) = 0
  std::int64_t max_bits = 0;     // largest entry of x_T, in bits (working-size measure)
};

// The profile of the perturbation of site `site`'s position (momentum =
// false) or momentum, over T periods, kept every `stride` periods and at T.
// Throws InvalidInput for a site outside 0..L-1, T < 0 or stride < 1, and
// ModelError for invalid gates.
SpreadProfile spread_profile(const GateSource& g, std::int64_t site, bool momentum, std::int64_t T,
                             std::int64_t stride = 1);

// Growth rates along rays from a profile's last row: for each velocity v
// (sites per period), ln a_T(round(site + v T)) / T; NaN where that site is
// outside 0..L-1 (open chains) or T = 0, -inf where the amplitude is 0
// (outside the light cone).
std::vector<double> ray_rates(const SpreadProfile& p, std::int64_t site, const std::vector<double>& v);

// The growth rate of the fastest-growing ray over a window, from the peaks
// m_j(t) = max_i ln a_t(i) of exact profiles of k starts j (t = 0..T):
//
//   rate = mean_j [m_j(T) - m_j(T/2)] / (T/2),
//
// the growth rate over the second half (the O(1) and most of the slowly
// growing terms of m cancel). Its error adds the standard error over the
// starts (disorder: the starts see different gates; 0 for one start) and a
// bias term 2 |rate - rate'|, rate' the same over [T/4, T/2]: a bias that
// falls like T^-alpha is |rate - rate'| / (2^alpha - 1) at T, at most
// 1.7 |rate - rate'| for alpha >= 2/3 (ln t / t for clean chains, the
// saddle point; t^(-2/3) for the fluctuations of a maximum in a random
// medium, common practice), so 2 covers both (tests/test_spreading.cpp checks
// the coverage against the exact rate of clean chains and against a 4x
// longer window of disordered ones).
struct PeakRate {
  double rate = 0, error = 0;  // NaN when T < 16
  double spread = 0;           // the standard error over the starts (part of error)
  std::int64_t periods = 0;    // T
  std::int64_t starts = 0;     // k
};

// `m[j]` holds m_j(t) for t = 0..T (the same T for every start), finite for t >= 1.
PeakRate peak_rate(const std::vector<std::vector<double>>& m);

// m(t) = max over sites of ln a_t(i) for each kept time of a profile kept
// every period (stride 1).
std::vector<double> profile_peak(const SpreadProfile& p);

}  // namespace toral
