#include "spreading.hpp"

#include <algorithm>
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

// acc = v * a (first term) or acc += v * a: unit entries, the common case in
// gates, are plain copies and additions (no limb multiplications).
void set_mul(fmpz_t acc, const fmpz_t a, std::int64_t v) {
  if (v == 1) fmpz_set(acc, a);
  else if (v == -1) fmpz_neg(acc, a);
  else fmpz_mul_si(acc, a, static_cast<slong>(v));
}

void add_mul(fmpz_t acc, const fmpz_t a, std::int64_t v) {
  if (v == 1) fmpz_add(acc, acc, a);
  else if (v == -1) fmpz_sub(acc, acc, a);
  else if (v > 0) fmpz_addmul_ui(acc, a, static_cast<ulong>(v));
  else fmpz_submul_ui(acc, a, static_cast<ulong>(-(v + 1)) + 1u);
}

// x <- g x on the m coordinates idx[0..m) of x, g row-major m x m, in place:
// the new values are built in the scratch entries s[0..m) and swapped in, so
// the scratch then holds the old values and their limbs are reused by the next
// gate (no allocation once the entries have grown). Nothing is done where all
// m inputs are zero (outside the light cone).
template <int m>
void apply_local(fmpz* x, const slong (&idx)[m], const std::int64_t* g, fmpz* s) {
  bool any = false;
  for (int k = 0; k < m; ++k) any = any || !fmpz_is_zero(x + idx[k]);
  if (!any) return;
  for (int j = 0; j < m; ++j) {
    bool first = true;
    for (int k = 0; k < m; ++k) {
      const std::int64_t v = g[j * m + k];
      const fmpz* a = x + idx[k];
      if (v == 0 || fmpz_is_zero(a)) continue;
      if (first) set_mul(s + j, a, v);
      else add_mul(s + j, a, v);
      first = false;
    }
    if (first) fmpz_zero(s + j);
  }
  for (int j = 0; j < m; ++j) fmpz_swap(x + idx[j], s + j);
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
  flint::Mat xm(1, n), sm(1, 4);
  fmpz* x = fmpz_mat_entry(xm.get(), 0, 0);
  fmpz* scratch = fmpz_mat_entry(sm.get(), 0, 0);
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
  // One period is S = K B_1 B_0 (assemble_period): the even bonds, then the
  // odd bonds, then the one-site layer K if any. Its gates act on disjoint
  // coordinates within a layer, so x_{t+1} = S x_t is applied gate by gate in
  // place, each gate's 4 x 4 (site: 2 x 2) block on its own coordinates:
  // fewer and cheaper limb operations than the rows of the assembled S,
  // whose entries mix two layers.
  Circuit c;
  for (std::int64_t t = 0; t < T; ++t) {
    if (t == 0 || !g.time_periodic) {
      c = materialize(g, t);
      c.validate();
    }
    for (int parity = 0; parity < 2; ++parity)
      for (std::int64_t b = parity; b < c.bond_count(); b += 2) {
        const slong s0 = static_cast<slong>(b), s1 = static_cast<slong>((b + 1) % L);
        // local 2k -> q of site s_k, 2k + 1 -> p of site s_k (model.cpp, bond_layer)
        const slong idx[4] = {s0, static_cast<slong>(L) + s0, s1, static_cast<slong>(L) + s1};
        apply_local<4>(x, idx, c.bonds[static_cast<std::size_t>(b)].G.a.data(), scratch);
      }
    if (c.has_site_layer())
      for (std::int64_t i = 0; i < L; ++i) {
        const slong idx[2] = {static_cast<slong>(i), static_cast<slong>(L + i)};
        apply_local<2>(x, idx, c.sites[static_cast<std::size_t>(i)].a.data(), scratch);
      }
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

PeakRate peak_rate(const std::vector<std::vector<double>>& m) {
  PeakRate r;
  if (m.empty() || m[0].empty()) throw InvalidInput("peak_rate: no profile");
  const std::size_t n = m[0].size();
  for (const auto& mj : m)
    if (mj.size() != n) throw InvalidInput("peak_rate: the starts' profiles differ in length");
  const std::int64_t T = static_cast<std::int64_t>(n) - 1;
  const std::size_t k = m.size();
  r.periods = T;
  r.starts = static_cast<std::int64_t>(k);
  if (T < 16) {
    r.rate = r.error = r.spread = std::numeric_limits<double>::quiet_NaN();
    return r;
  }
  const auto h = static_cast<std::size_t>(T / 2), q = static_cast<std::size_t>(T / 4);
  std::vector<double> late(k), early(k);
  double mean = 0, mean_early = 0;
  for (std::size_t j = 0; j < k; ++j) {
    late[j] = (m[j][static_cast<std::size_t>(T)] - m[j][h]) / static_cast<double>(static_cast<std::size_t>(T) - h);
    early[j] = (m[j][h] - m[j][q]) / static_cast<double>(h - q);
    mean += late[j];
    mean_early += early[j];
  }
  mean /= static_cast<double>(k);
  mean_early /= static_cast<double>(k);
  double var = 0;
  for (double x : late) var += (x - mean) * (x - mean);
  r.spread = k > 1 ? std::sqrt(var / static_cast<double>(k - 1) / static_cast<double>(k)) : 0.0;
  r.rate = mean;
  r.error = r.spread + 2.0 * std::abs(mean - mean_early);
  return r;
}

std::vector<double> profile_peak(const SpreadProfile& p) {
  std::vector<double> m(p.t.size(), -std::numeric_limits<double>::infinity());
  for (std::size_t k = 0; k < p.t.size(); ++k)
    for (std::int64_t i = 0; i < p.L; ++i)
      m[k] = std::max(m[k], p.log_amp[k * static_cast<std::size_t>(p.L) + static_cast<std::size_t>(i)]);
  return m;
}

}  // namespace toral
