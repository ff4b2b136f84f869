#include "spectrum.hpp"
#include "errors.hpp"

#include <lapacke.h>

#include "unit_circle.hpp"

#include <algorithm>
#include <cmath>
#include <functional>
#include <limits>
#include <sstream>
#include <stdexcept>

namespace toral {

namespace {
// Dense spectra whose largest error estimate exceeds this (after the exact
// zeros) are recomputed from certified roots of the characteristic polynomial.
constexpr double kCertifyAbove = 1e-10;
}  // namespace

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

void apply_exact_zeros(Spectrum& s, std::int64_t zeros) {
  const std::int64_t n = static_cast<std::int64_t>(s.exponents.size());
  if (zeros < 0 || zeros > n || (n - zeros) % 2 != 0)
    throw std::logic_error("apply_exact_zeros: " + std::to_string(zeros) + " zeros among " + std::to_string(n) +
                           " exponents");
  if (s.errors.size() != s.exponents.size()) s.errors.assign(s.exponents.size(), s.error_bound);
  const std::int64_t first = (n - zeros) / 2;
  // The exact count says which exponents are zero only as a number; the
  // `zeros` nearest zero are taken. That choice is unambiguous when every
  // exponent kept is farther from zero, by more than its own error, than
  // every exponent set to zero (dgeevx scatters a Jordan block of size m by
  // ~eps^(1/m), which can be large; the exact count makes that harmless as
  // long as the two groups separate).
  double zeroed = 0.0, kept = std::numeric_limits<double>::infinity(), kept_err = 0.0;
  for (std::int64_t i = 0; i < n; ++i) {
    const auto u = static_cast<std::size_t>(i);
    const double a = std::fabs(s.exponents[u]);
    if (i >= first && i < first + zeros) {
      zeroed = std::max(zeroed, a);
    } else if (a - s.errors[u] < kept) {
      kept = a - s.errors[u];
      kept_err = s.errors[u];
    }
  }
  for (std::int64_t i = first; i < first + zeros; ++i) {
    s.exponents[static_cast<std::size_t>(i)] = 0.0;
    s.errors[static_cast<std::size_t>(i)] = 0.0;
  }
  // Keep the order descending (a nonzero exponent next to the zeros may have
  // been computed with the wrong sign, within its error).
  std::vector<std::size_t> idx(s.exponents.size());
  for (std::size_t i = 0; i < idx.size(); ++i) idx[i] = i;
  std::stable_sort(idx.begin(), idx.end(), [&](std::size_t a, std::size_t b) { return s.exponents[a] > s.exponents[b]; });
  std::vector<double> ev(idx.size()), er(idx.size());
  for (std::size_t i = 0; i < idx.size(); ++i) {
    ev[i] = s.exponents[idx[i]];
    er[i] = s.errors[idx[i]];
  }
  s.exponents.swap(ev);
  s.errors.swap(er);
  s.zero_rule = ZeroRule::Exact;
  s.zero_count = zeros;
  if (zeros > 0 && zeros < n && !(zeroed < kept)) {
    std::ostringstream os;
    os << "the exact count of zero exponents does not separate them from the others: an exponent set to 0 "
       << "was computed as " << zeroed << ", a nonzero one as " << kept + kept_err << " +- " << kept_err;
    s.warning = os.str();
  }
  s.error_bound = 0.0;
  for (double e : s.errors) s.error_bound = std::max(s.error_bound, e);
  measure_pairing(s);
}

ChaosSummary summarize(const Spectrum& s, std::int64_t L, const SummaryOptions& o) {
  ChaosSummary r;
  const auto& e = s.exponents;
  if (e.empty()) throw InvalidInput("summarize: empty spectrum");
  r.lambda_max = e.front();
  const bool per = s.errors.size() == e.size();
  const double zero = std::max(o.zero_tol, s.error_bound);
  if (s.zero_rule == ZeroRule::Exact) {
    // Exactly (n - zeros) / 2 exponents are positive: the largest ones.
    r.zero_count = s.zero_count;
    r.unstable_count = (static_cast<std::int64_t>(e.size()) - s.zero_count) / 2;
    for (std::int64_t i = 0; i < r.unstable_count; ++i) r.ks_rate += e[static_cast<std::size_t>(i)];
  } else {
    // Without an exact count an exponent counts as positive only above its
    // own error estimate (Jordan blocks on the unit circle scatter by
    // eps^(1/m)), and as zero within it.
    r.zero_count = 0;
    for (std::size_t i = 0; i < e.size(); ++i) {
      const double tol = per ? std::max(o.zero_tol, s.errors[i]) : zero;
      if (e[i] > tol) {
        r.ks_rate += e[i];
        ++r.unstable_count;
      } else if (std::fabs(e[i]) <= tol) {
        ++r.zero_count;
      }
    }
  }
  r.ks_density = r.ks_rate / static_cast<double>(L);
  const std::int64_t n = static_cast<std::int64_t>(e.size());
  const std::int64_t keep = n <= o.keep_all ? n : std::min<std::int64_t>(o.top, n);
  r.kept.assign(e.begin(), e.begin() + keep);
  const double span = r.lambda_max > o.zero_tol ? r.lambda_max : 1.0;
  if (s.zero_rule == ZeroRule::Exact) {
    // Exact zeros sit on the bin edge at 0 and count half on each side.
    histogram(e, -span, span, o.bins, r.hist_counts, r.hist_edges, std::numeric_limits<double>::denorm_min());
  } else if (per) {
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
    throw SolverError("LAPACK dgeevx failed (info = " + std::to_string(info) + ")");
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

Spectrum dense_spectrum(const Circuit& c, std::int64_t certify_max) {
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
  if (A.n <= certify_max) {
    // Exact zeros always; certified values for every exponent as well when
    // LAPACK's are poor (Jordan blocks of nonzero eigenvalues, clusters, huge
    // entries) or do not separate from the exact zeros.
    ExactSpectrum ex = exact_spectrum(c, false);
    apply_exact_zeros(s, ex.zero_exponents);
    if (!s.warning.empty() || !(s.error_bound <= kCertifyAbove)) {
      ex = exact_spectrum(c, true);
      if (ex.exponents.size() == s.exponents.size()) {
        s.method = Method::Dense;
        s.warning.clear();
        s.error_bound = 0.0;
        for (std::size_t i = 0; i < ex.exponents.size(); ++i) {
          s.exponents[i] = ex.exponents[i].first;
          s.errors[i] = ex.exponents[i].second;
          s.error_bound = std::max(s.error_bound, s.errors[i]);
        }
        measure_pairing(s);
        s.certified_values = true;
      }
    }
    if (pos) s.sum_defect = std::fabs(msum);
  }
  return s;
}

}  // namespace toral
