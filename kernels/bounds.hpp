// Entanglement-growth bounds per point, for region sizes ell and local
// dimensions N. Pure functions of a point's Lyapunov data.
#pragma once
#include <cstdint>
#include <vector>

namespace toral {

struct BoundsInput {
  std::int64_t L = 0;
  std::vector<double> top;  // the largest exponents known, descending
  double lambda_max = 0.0;
  double ks_rate = 0.0;
  int cuts = 2;  // boundary cuts of the region, each crossed by one gate per period
};

struct Bounds {
  // all row-major [ell][N] where two axes apply; NaN where ell is not in 1..L-1
  std::vector<double> lyapunov_rate;         // [ell]
  std::vector<double> hilbert_cap;           // [ell][N]
  std::vector<double> lightcone_rate;        // [N]
  std::vector<double> ehrenfest_time;        // [N]
  std::vector<double> saturation_lyapunov;   // [ell][N]
  std::vector<double> saturation_lightcone;  // [ell][N]
};

// Lyapunov rate of an ell-site region of a pure global state: the sum of the
// 2 min(ell, L - ell) largest exponents (NaN when fewer are known).
double lyapunov_rate(const std::vector<double>& top, std::int64_t L, std::int64_t ell);

Bounds entanglement_bounds(const BoundsInput& in, const std::vector<std::int64_t>& ells,
                           const std::vector<std::int64_t>& Ns);

}  // namespace toral
