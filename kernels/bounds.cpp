#include "bounds.hpp"

#include <algorithm>
#include <cmath>
#include <limits>

namespace toral {

namespace {
constexpr double nan_v = std::numeric_limits<double>::quiet_NaN();
constexpr double inf_v = std::numeric_limits<double>::infinity();

// Time at which a linear curve rate * t reaches cap.
double saturation(double cap, double rate) {
  if (std::isnan(cap) || std::isnan(rate)) return nan_v;
  if (cap <= 0.0) return 0.0;
  return rate > 0.0 ? cap / rate : inf_v;
}
}  // namespace

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
  b.lyapunov_rate.resize(nl);
  b.hilbert_cap.resize(nl * nn);
  b.lightcone_rate.resize(nn);
  b.ehrenfest_time.resize(nn);
  b.saturation_lyapunov.resize(nl * nn);
  b.saturation_lightcone.resize(nl * nn);
  for (std::size_t j = 0; j < nn; ++j) {
    const double lnN = std::log(static_cast<double>(Ns[j]));
    b.lightcone_rate[j] = 2.0 * in.cuts * lnN;
    b.ehrenfest_time[j] = in.lambda_max > 0.0 ? lnN / in.lambda_max : inf_v;
  }
  for (std::size_t i = 0; i < nl; ++i) {
    const std::int64_t ell = ells[i];
    const bool inside = ell >= 1 && ell < in.L;
    b.lyapunov_rate[i] = lyapunov_rate(in.top, in.L, ell);
    for (std::size_t j = 0; j < nn; ++j) {
      const std::size_t k = i * nn + j;
      const double lnN = std::log(static_cast<double>(Ns[j]));
      const double cap = inside ? static_cast<double>(std::min(ell, in.L - ell)) * lnN : nan_v;
      b.hilbert_cap[k] = cap;
      b.saturation_lyapunov[k] = saturation(cap, b.lyapunov_rate[i]);
      b.saturation_lightcone[k] = saturation(cap, b.lightcone_rate[j]);
    }
  }
  return b;
}

}  // namespace toral
