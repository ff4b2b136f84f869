#include "stats.hpp"

#include <algorithm>
#include <cmath>
#include <limits>

namespace toral {

SampleStats sample_stats(std::vector<double> v) {
  const double nan = std::numeric_limits<double>::quiet_NaN();
  SampleStats s{nan, nan, nan, nan};
  const std::size_t n = v.size();
  if (n == 0) return s;
  if (std::any_of(v.begin(), v.end(), [](double x) { return std::isnan(x); })) return s;
  // Two-pass mean and variance (numerically stable; common practice).
  double sum = 0;
  for (double x : v) sum += x;
  s.mean = sum / static_cast<double>(n);
  std::sort(v.begin(), v.end());
  s.median = n % 2 ? v[n / 2] : 0.5 * (v[n / 2 - 1] + v[n / 2]);
  if (n >= 2) {
    double ss = 0;
    for (double x : v) ss += (x - s.mean) * (x - s.mean);
    s.std = std::sqrt(ss / static_cast<double>(n - 1));
    s.sem = s.std / std::sqrt(static_cast<double>(n));
  }
  if (std::isinf(s.mean)) s.std = s.sem = nan;
  return s;
}

}  // namespace toral
