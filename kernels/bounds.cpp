#include "bounds.hpp"

#include <algorithm>
#include <cmath>
#include <limits>

namespace toral {

namespace {
constexpr double nan_v = std::numeric_limits<double>::quiet_NaN();
constexpr double inf_v = std::numeric_limits<double>::infinity();
}  // namespace

double rate_ratio(double x, double rate) {
  if (std::isnan(x) || std::isnan(rate)) return nan_v;
  if (rate > 0.0) return x / rate;
  if (x > 0.0) return inf_v;
  if (x < 0.0) return -inf_v;
  return nan_v;
}

std::int64_t block_cuts(std::int64_t L, Boundary boundary, bool edge, std::int64_t ell) {
  if (ell < 1 || ell > L) return -1;
  if (ell == L) return 0;
  if (boundary == Boundary::Periodic) return 2;
  if (edge) return 1;
  return ell <= L - 2 ? 2 : 1;
}

double lyapunov_rate(const std::vector<double>& top, std::int64_t L, std::int64_t ell) {
  if (ell < 1 || ell >= L) return nan_v;
  const std::int64_t m = 2 * std::min(ell, L - ell);
  if (m > static_cast<std::int64_t>(top.size())) return nan_v;
  double s = 0.0;
  for (std::int64_t i = 0; i < m; ++i) s += top[static_cast<std::size_t>(i)];
  return s;
}

Bounds entanglement_bounds(const BoundsInput& in, const std::vector<std::int64_t>& ells,
                           const std::vector<std::int64_t>& Ns) {
  Bounds b;
  const std::size_t nl = ells.size(), nn = Ns.size();
  b.cuts.resize(nl);
  b.lyapunov_rate.resize(nl);
  b.hilbert_cap.resize(nl * nn);
  b.lightcone_rate.resize(nl * nn);
  b.ehrenfest_time.resize(nn);
  b.saturation_lyapunov.resize(nl * nn);
  b.saturation_lightcone.resize(nl * nn);
  for (std::size_t j = 0; j < nn; ++j)
    b.ehrenfest_time[j] = rate_ratio(std::log(static_cast<double>(Ns[j])), in.lambda_max);
  for (std::size_t i = 0; i < nl; ++i) {
    const std::int64_t ell = ells[i];
    const bool inside = ell >= 1 && ell < in.L;
    b.cuts[i] = block_cuts(in.L, in.boundary, in.edge, ell);
    b.lyapunov_rate[i] = lyapunov_rate(in.top, in.L, ell);
    for (std::size_t j = 0; j < nn; ++j) {
      const std::size_t k = i * nn + j;
      const double lnN = std::log(static_cast<double>(Ns[j]));
      const double cap = inside ? static_cast<double>(std::min(ell, in.L - ell)) * lnN : nan_v;
      const double light = inside ? 2.0 * static_cast<double>(b.cuts[i]) * lnN : nan_v;
      b.hilbert_cap[k] = cap;
      b.lightcone_rate[k] = light;
      b.saturation_lyapunov[k] = rate_ratio(cap, b.lyapunov_rate[i]);
      b.saturation_lightcone[k] = rate_ratio(cap, light);
    }
  }
  return b;
}

}  // namespace toral
