#include "localisation.hpp"

#include <cmath>
#include <limits>
#include <string>

#include "errors.hpp"

namespace toral {

Localisation localisation(const std::vector<double>& v, std::int64_t L, bool ring) {
  if (L < 1 || v.size() != static_cast<std::size_t>(2 * L))
    throw InvalidInput("localisation: needs 2L = " + std::to_string(2 * L) + " entries, got " +
                       std::to_string(v.size()));
  Localisation out;
  const std::size_t n = static_cast<std::size_t>(L);
  out.weight.assign(n, 0.0);
  double norm2 = 0.0;
  for (std::size_t i = 0; i < n; ++i) {
    out.weight[i] = v[i] * v[i] + v[n + i] * v[n + i];
    norm2 += out.weight[i];
  }
  if (!(norm2 > 0.0) || !std::isfinite(norm2)) throw InvalidInput("localisation: zero or non-finite vector");
  double best = -1.0;
  for (std::size_t i = 0; i < n; ++i) {
    out.weight[i] /= norm2;
    out.ipr += out.weight[i] * out.weight[i];
    if (out.weight[i] > best) best = out.weight[i], out.peak = static_cast<std::int64_t>(i);
  }
  out.participation = 1.0 / out.ipr;
  // Least-squares slope of ln w_i against the distance d_i from the peak.
  double sd = 0, sy = 0, sdd = 0, sdy = 0, syy = 0;
  std::int64_t m = 0;
  std::int64_t dmin = std::numeric_limits<std::int64_t>::max(), dmax = -1;
  for (std::int64_t i = 0; i < L; ++i) {
    const double w = out.weight[static_cast<std::size_t>(i)];
    if (!(w >= kWeightFloor)) continue;
    std::int64_t d = i > out.peak ? i - out.peak : out.peak - i;
    if (ring) d = std::min(d, L - d);
    const double x = static_cast<double>(d), y = std::log(w);
    sd += x, sy += y, sdd += x * x, sdy += x * y, syy += y * y;
    dmin = std::min(dmin, d), dmax = std::max(dmax, d);
    ++m;
  }
  out.fitted = m;
  const double nan = std::numeric_limits<double>::quiet_NaN();
  if (m < 3 || dmin == dmax) {
    out.xi = out.xi_error = nan;
    return out;
  }
  const double M = static_cast<double>(m);
  const double sxx = sdd - sd * sd / M, sxy = sdy - sd * sy / M, s2yy = syy - sy * sy / M;
  const double s = sxy / sxx;
  if (!(s < 0.0)) {
    out.xi = std::numeric_limits<double>::infinity();
    out.xi_error = nan;
    return out;
  }
  const double rss = std::max(0.0, s2yy - s * sxy);
  const double se = std::sqrt(rss / (M - 2.0) / sxx);
  out.xi = -2.0 / s;
  out.xi_error = 2.0 * se / (s * s);
  return out;
}

}  // namespace toral
