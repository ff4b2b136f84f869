#include "spreading.hpp"

#include <cmath>
#include <limits>
#include <string>

#include "errors.hpp"
#include "flint_raii.hpp"

namespace toral {

namespace {

double log_abs(const fmpz_t x) {
  if (fmpz_is_zero(x)) return -std::numeric_limits<double>::infinity();
  slong e = 0;
  const double d = fmpz_get_d_2exp(&e, x);  // |x| = |d| 2^e, 0.5 <= |d| < 1
  return std::log(std::fabs(d)) + static_cast<double>(e) * std::log(2.0);
}

}  // namespace

SpreadProfile spread_profile(const GateSource& g, std::int64_t site, bool momentum, std::int64_t T,
                             std::int64_t stride) {
  const std::int64_t L = g.L;
  if (site < 0 || site >= L)
    throw InvalidInput("spread_profile: site " + std::to_string(site) + " outside 0.." + std::to_string(L - 1));
  if (T < 0) throw InvalidInput("spread_profile: T = " + std::to_string(T) + " < 0");
  if (stride < 1) throw InvalidInput("spread_profile: stride = " + std::to_string(stride) + " < 1");
  const slong n = static_cast<slong>(2 * L);  // coordinates (q_0..q_{L-1}, p_0..p_{L-1}) (model.hpp)
  flint::Mat xm(1, n), ym(1, n);
  fmpz* x = fmpz_mat_entry(xm.get(), 0, 0);
  fmpz* y = fmpz_mat_entry(ym.get(), 0, 0);
  fmpz_one(x + (momentum ? L + site : site));
  SpreadProfile out;
  out.L = L;
  auto keep = [&](std::int64_t t) {
    out.t.push_back(t);
    for (std::int64_t i = 0; i < L; ++i) {
      const fmpz* q = x + i;
      const fmpz* p = x + L + i;
      out.log_amp.push_back(fmpz_cmpabs(q, p) >= 0 ? log_abs(q) : log_abs(p));
    }
  };
  keep(0);
  SparseInt S;
  Circuit c;
  for (std::int64_t t = 0; t < T; ++t) {
    if (t == 0 || !g.time_periodic) {
      c = materialize(g, t);
      c.validate();
      S = assemble_period(c);
    }
    for (slong i = 0; i < n; ++i) {
      fmpz_zero(y + i);
      for (std::int64_t k = S.rowptr[static_cast<std::size_t>(i)]; k < S.rowptr[static_cast<std::size_t>(i) + 1]; ++k) {
        const fmpz* xs = x + S.col[static_cast<std::size_t>(k)];
        if (fmpz_is_zero(xs)) continue;
        const std::int64_t v = S.val[static_cast<std::size_t>(k)];
        if (v >= 0) fmpz_addmul_ui(y + i, xs, static_cast<ulong>(v));
        else fmpz_submul_ui(y + i, xs, static_cast<ulong>(-(v + 1)) + 1u);
      }
    }
    fmpz_mat_swap(xm.get(), ym.get());
    x = fmpz_mat_entry(xm.get(), 0, 0);
    y = fmpz_mat_entry(ym.get(), 0, 0);
    if ((t + 1) % stride == 0 || t + 1 == T) keep(t + 1);
  }
  for (slong i = 0; i < n; ++i)
    out.max_bits = std::max<std::int64_t>(out.max_bits, static_cast<std::int64_t>(fmpz_bits(x + i)));
  return out;
}

std::vector<double> ray_rates(const SpreadProfile& p, std::int64_t site, const std::vector<double>& v) {
  std::vector<double> r(v.size(), std::numeric_limits<double>::quiet_NaN());
  if (p.t.empty() || p.t.back() == 0) return r;
  const std::int64_t T = p.t.back();
  const double* last = p.log_amp.data() + (p.t.size() - 1) * static_cast<std::size_t>(p.L);
  for (std::size_t k = 0; k < v.size(); ++k) {
    const double x = std::round(static_cast<double>(site) + v[k] * static_cast<double>(T));
    if (x < 0 || x > static_cast<double>(p.L - 1)) continue;
    r[k] = last[static_cast<std::size_t>(x)] / static_cast<double>(T);
  }
  return r;
}

}  // namespace toral
