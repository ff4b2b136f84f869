#include "spectrum.hpp"

#include <lapacke.h>

#include <algorithm>
#include <cmath>
#include <functional>
#include <limits>
#include <stdexcept>

namespace toral {

const char* method_name(Method m) {
  switch (m) {
    case Method::Bloch: return "bloch";
    case Method::Dense: return "dense";
    case Method::Krylov: return "krylov";
    case Method::Tangent: return "tangent";
    default: return "none";
  }
}

void measure_pairing(Spectrum& s) {
  const auto& e = s.exponents;
  const std::size_t n = e.size();
  double pd = 0.0, sum = 0.0;
  for (std::size_t i = 0; i < n; ++i) {
    pd = std::max(pd, std::fabs(e[i] + e[n - 1 - i]));
    sum += e[i];
  }
  s.pairing_defect = pd;
  s.sum_defect = std::fabs(sum);
}

void histogram(const std::vector<double>& values, double lo, double hi, int bins,
               std::vector<double>& counts, std::vector<double>& edges, double zero) {
  counts.assign(static_cast<std::size_t>(bins), 0.0);
  edges.resize(static_cast<std::size_t>(bins) + 1);
  for (int j = 0; j <= bins; ++j) edges[static_cast<std::size_t>(j)] = lo + (hi - lo) * j / bins;
  if (values.empty() || bins <= 0) return;
  const double w = (hi - lo) / bins;
  const double z = (0.0 - lo) / w;  // position of 0 in bin units
  const bool zero_on_edge = z > 0 && z < bins && std::fabs(z - std::round(z)) < 1e-12;
  for (double v : values) {
    if (zero > 0 && std::fabs(v) <= zero && zero_on_edge) {
      const auto j = static_cast<std::size_t>(std::lround(z));
      counts[j - 1] += 0.5;
      counts[j] += 0.5;
      continue;
    }
    if (zero > 0 && std::fabs(v) <= zero) v = 0.0;
    long j = static_cast<long>(std::floor((v - lo) / w));
    j = std::clamp(j, 0L, static_cast<long>(bins) - 1);
    counts[static_cast<std::size_t>(j)] += 1.0;
  }
  for (double& c : counts) c /= static_cast<double>(values.size());
}

ChaosSummary summarize(const Spectrum& s, std::int64_t L, const SummaryOptions& o) {
  ChaosSummary r;
  const auto& e = s.exponents;
  if (e.empty()) throw std::invalid_argument("summarize: empty spectrum");
  r.lambda_max = e.front();
  // An exponent counts as positive only above its own error estimate
  // (eigenvalues of Jordan blocks on the unit circle scatter by eps^(1/m)).
  const bool per = s.errors.size() == e.size();
  const double zero = std::max(o.zero_tol, s.error_bound);
  for (std::size_t i = 0; i < e.size(); ++i)
    if (e[i] > (per ? std::max(o.zero_tol, s.errors[i]) : zero)) {
      r.ks_rate += e[i];
      ++r.unstable_count;
    }
  r.ks_density = r.ks_rate / static_cast<double>(L);
  const std::int64_t n = static_cast<std::int64_t>(e.size());
  const std::int64_t keep = n <= o.keep_all ? n : std::min<std::int64_t>(o.top, n);
  r.kept.assign(e.begin(), e.begin() + keep);
  const double span = r.lambda_max > o.zero_tol ? r.lambda_max : 1.0;
  if (per) {
    // Exponents within their own error of zero are zeros blurred by rounding.
    std::vector<double> v(e);
    for (std::size_t i = 0; i < v.size(); ++i)
      if (std::fabs(v[i]) <= std::max(o.zero_tol, s.errors[i])) v[i] = 0.0;
    histogram(v, -span, span, o.bins, r.hist_counts, r.hist_edges, o.zero_tol);
  } else {
    histogram(e, -span, span, o.bins, r.hist_counts, r.hist_edges, zero);
  }
  return r;
}

DenseEig dense_eigenvalues(std::vector<double> a, std::int64_t n) {
  DenseEig r;
  if (n <= 0) return r;
  const lapack_int N = static_cast<lapack_int>(n);
  r.re.resize(static_cast<std::size_t>(n));
  r.im.resize(static_cast<std::size_t>(n));
  std::vector<double> vl(static_cast<std::size_t>(n * n)), vr(static_cast<std::size_t>(n * n));
  std::vector<double> scale(static_cast<std::size_t>(n)), rconde(static_cast<std::size_t>(n)),
      rcondv(static_cast<std::size_t>(n));
  lapack_int ilo = 0, ihi = 0;
  double abnrm = 0.0;
  // Balanced, with eigenvalue condition numbers: the error bound of eigenvalue
  // i is EPS * ||A|| / RCONDE(i) (LAPACK Users' Guide, 3rd ed., section 4.8).
  const lapack_int info = LAPACKE_dgeevx(LAPACK_ROW_MAJOR, 'B', 'V', 'V', 'E', N, a.data(), N,
                                         r.re.data(), r.im.data(), vl.data(), N, vr.data(), N,
                                         &ilo, &ihi, scale.data(), &abnrm, rconde.data(),
                                         rcondv.data());
  if (info != 0)
    throw std::runtime_error("LAPACK dgeevx failed (info = " + std::to_string(info) + ")");
  const double eps = std::numeric_limits<double>::epsilon();
  const std::size_t nn = static_cast<std::size_t>(n);
  r.err.resize(nn);
  std::vector<double> dist(nn);
  for (std::size_t i = 0; i < nn; ++i) {
    double best = rconde[i] > 0 ? eps * abnrm / rconde[i] : std::numeric_limits<double>::infinity();
    if (best > 2 * abnrm * std::sqrt(eps)) {
      // Ill-conditioned: look for the smallest cluster that explains it.
      for (std::size_t j = 0; j < nn; ++j) dist[j] = std::hypot(r.re[j] - r.re[i], r.im[j] - r.im[i]);
      std::sort(dist.begin(), dist.end());
      for (std::size_t m = 2; m <= nn; ++m) {
        const double radius = 2 * abnrm * std::pow(eps, 1.0 / static_cast<double>(m));
        if (radius >= best) break;
        if (dist[m - 1] <= radius) {
          best = radius;
          break;
        }
      }
    }
    r.err[i] = best;
  }
  return r;
}

Spectrum dense_spectrum(const Circuit& c) {
  Spectrum s;
  s.method = Method::Dense;
  const bool pos = c.position_class();
  const SparseInt A = pos ? assemble_position_block(c) : assemble_period(c);
  const DenseEig eig = dense_eigenvalues(A.dense(), A.n);
  std::vector<std::pair<double, double>> lam;  // (exponent, error)
  lam.reserve(static_cast<std::size_t>(2 * c.L));
  double bound = 0.0, msum = 0.0;
  for (std::size_t i = 0; i < eig.re.size(); ++i) {
    const double mod = std::hypot(eig.re[i], eig.im[i]);
    const double l = std::log(mod);
    // d(ln|mu|) = d|mu| / |mu|, and at most the distance to ln of the far side
    const double e = eig.err[i] < mod ? std::log1p(eig.err[i] / (mod - eig.err[i])) : std::numeric_limits<double>::infinity();
    lam.emplace_back(l, e);
    if (pos) lam.emplace_back(-l, e);  // spec(S) = spec(M) u 1/spec(M)
    msum += l;
    bound = std::max(bound, e);
  }
  std::sort(lam.begin(), lam.end(), [](const auto& a, const auto& b) { return a.first > b.first; });
  for (const auto& [l, e] : lam) {
    s.exponents.push_back(l);
    s.errors.push_back(e);
  }
  measure_pairing(s);
  // For a position-class circuit the +- pairing holds by construction; the
  // independent check is ln|det M| = sum ln|mu(M)| = 0 (det M = +-1).
  if (pos) s.sum_defect = std::fabs(msum);
  s.error_bound = bound;
  return s;
}

}  // namespace toral
