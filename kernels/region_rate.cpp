#include "region_rate.hpp"
#include "errors.hpp"

#include <arb.h>
#include <arb_mat.h>
#include <flint/fmpz.h>
#include <flint/fmpz_mat.h>

#include "flint_raii.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <memory>
#include <stdexcept>
#include <string>

namespace toral {

namespace {

constexpr double kNaNv = std::numeric_limits<double>::quiet_NaN();
// Certified radius wanted for every ln vol, relative to max(1, |ln vol|).
constexpr double kTargetRelative = 1e-14;

using FmpzMat = flint::Mat;
using ArbMat = flint::BallMat;
using Arb = flint::Ball;
using Fmpz = flint::Int;

// ln x of a positive integer, to double rounding (mantissa and exponent
// separately, so any size works).
double log_fmpz(const fmpz_t x) {
  slong e = 0;
  const double d = fmpz_get_d_2exp(&e, x);  // x = d 2^e, 0.5 <= d < 1
  return std::log(d) + static_cast<double>(e) * std::log(2.0);
}

// The rows R = P_B S^t on their light cone: `support` holds the (sorted)
// global columns that can be non-zero, R the 2m x |support| exact entries.
class Rows {
 public:
  Rows(const SparseInt& S, const std::vector<std::int64_t>& rows)
      : S_(S), where_(static_cast<std::size_t>(S.n), -1), mark_(static_cast<std::size_t>(S.n), 0) {
    support_ = rows;
    std::sort(support_.begin(), support_.end());
    R_ = std::make_unique<FmpzMat>(static_cast<slong>(rows.size()), static_cast<slong>(support_.size()));
    for (std::size_t r = 0; r < rows.size(); ++r) {
      const auto it = std::lower_bound(support_.begin(), support_.end(), rows[r]);
      fmpz_one(fmpz_mat_entry(R_->get(), static_cast<slong>(r), it - support_.begin()));
    }
  }

  // R <- R S: row vector r times S is sum_i r_i S[i, :] (S in compressed
  // rows), so only the rows i of S in the support contribute. Columns that
  // come out exactly zero are dropped.
  void step() {
    std::vector<std::int64_t> next;
    for (std::int64_t g : support_)
      for (std::int64_t e = S_.rowptr[g]; e < S_.rowptr[g + 1]; ++e) mark_[static_cast<std::size_t>(S_.col[e])] = 1;
    for (std::int64_t j = 0; j < S_.n; ++j)
      if (mark_[static_cast<std::size_t>(j)]) {
        where_[static_cast<std::size_t>(j)] = static_cast<std::int64_t>(next.size());
        next.push_back(j);
        mark_[static_cast<std::size_t>(j)] = 0;
      }
    const slong rows = R_->get()->r;
    auto Rn = std::make_unique<FmpzMat>(rows, static_cast<slong>(next.size()));
    for (std::size_t ci = 0; ci < support_.size(); ++ci) {
      const std::int64_t g = support_[ci];
      for (std::int64_t e = S_.rowptr[g]; e < S_.rowptr[g + 1]; ++e) {
        const slong jj = static_cast<slong>(where_[static_cast<std::size_t>(S_.col[e])]);
        const slong v = static_cast<slong>(S_.val[e]);
        for (slong r = 0; r < rows; ++r)
          fmpz_addmul_si(fmpz_mat_entry(Rn->get(), r, jj), fmpz_mat_entry(R_->get(), r, static_cast<slong>(ci)), v);
      }
    }
    for (std::int64_t j : next) where_[static_cast<std::size_t>(j)] = -1;
    std::vector<slong> keep;
    for (std::size_t j = 0; j < next.size(); ++j) {
      bool nz = false;
      for (slong r = 0; r < rows && !nz; ++r) nz = !fmpz_is_zero(fmpz_mat_entry(Rn->get(), r, static_cast<slong>(j)));
      if (nz) keep.push_back(static_cast<slong>(j));
    }
    if (keep.size() != next.size()) {
      auto Rk = std::make_unique<FmpzMat>(rows, static_cast<slong>(keep.size()));
      std::vector<std::int64_t> cols;
      for (std::size_t j = 0; j < keep.size(); ++j) {
        for (slong r = 0; r < rows; ++r)
          fmpz_swap(fmpz_mat_entry(Rk->get(), r, static_cast<slong>(j)), fmpz_mat_entry(Rn->get(), r, keep[j]));
        cols.push_back(next[static_cast<std::size_t>(keep[j])]);
      }
      Rn = std::move(Rk);
      next = std::move(cols);
    }
    R_ = std::move(Rn);
    support_ = std::move(next);
  }

  // ln vol(R) = (1/2) ln det(R R^T) = sum_i ln L_ii, L the Cholesky factor
  // of G = R R^T, as a certified ball: R (exact) is rounded to `prec` bits,
  // G and L are formed in arb ball arithmetic, and prec doubles until the
  // ball's radius is at most `target` (relative to max(1, |ln vol|)). Floating
  // precision only has to cover the condition number of G (about
  // e^{2 (lambda_1 - lambda_min) t} over the region's directions), not the
  // size of R's entries. The exact determinant of the exact Gram matrix is the
  // last resort (past 4 times R's bit size, where every step is exact).
  // Returns the midpoint and sets `radius`; `prec` carries over to the next t.
  double log_volume(slong& prec, double& radius, double target) const {
    const slong n = R_->get()->r, w = R_->get()->c;
    const slong cap = 4 * std::max<slong>(64, static_cast<slong>(bits())) + 256;
    for (;; prec *= 2) {
      if (prec > cap) break;
      ArbMat A(n, w), AT(w, n), G(n, n), L(n, n);
      arb_mat_set_round_fmpz_mat(A.get(), R_->get(), prec);
      arb_mat_transpose(AT.get(), A.get());
      arb_mat_mul(G.get(), A.get(), AT.get(), prec);
      if (!arb_mat_cho(L.get(), G.get(), prec)) continue;
      Arb sum, lg;
      arb_zero(sum.get());
      for (slong i = 0; i < n; ++i) {
        arb_log(lg.get(), arb_mat_entry(L.get(), i, i), prec);
        arb_add(sum.get(), sum.get(), lg.get(), prec);
      }
      const double mid = arf_get_d(arb_midref(sum.get()), ARF_RND_NEAR);
      const double rad = mag_get_d(arb_radref(sum.get()));
      if (std::isfinite(rad) && rad <= target * std::max(1.0, std::fabs(mid))) {
        // the midpoint's rounding to double: half an ulp
        radius = rad + 0.5 * std::ldexp(1.0, std::ilogb(std::max(std::fabs(mid), 1e-300)) - 52);
        return mid;
      }
    }
    prec = cap;
    FmpzMat G(n, n);
    fmpz_mat_gram(G.get(), R_->get());
    Fmpz d;
    fmpz_mat_det(d.get(), G.get());
    if (fmpz_sgn(d.get()) <= 0)  // R has full row rank (S is invertible): cannot happen
      throw std::logic_error("region_rate: Gram determinant " + std::string(fmpz_sgn(d.get()) == 0 ? "0" : "< 0"));
    const double mid = 0.5 * log_fmpz(d.get());
    radius = 4.0 * std::ldexp(1.0, std::ilogb(std::max(std::fabs(mid), 1e-300)) - 52);  // rounding of two logs
    return mid;
  }

  std::int64_t bits() const { return static_cast<std::int64_t>(std::labs(fmpz_mat_max_bits(R_->get()))); }
  std::int64_t columns() const { return static_cast<std::int64_t>(support_.size()); }

 private:
  const SparseInt& S_;
  std::vector<std::int64_t> support_, where_;
  std::vector<char> mark_;
  std::unique_ptr<FmpzMat> R_;
};

}  // namespace

std::size_t late_window_start(std::size_t n) {
  if (n < 2) throw InvalidInput("late_window_start: a curve needs at least two points");
  const std::size_t T = n - 1;
  return std::min((3 * T + 3) / 4, T - 1);  // ceil(3T/4), at least two points
}

double late_slope(const double* y, std::size_t n) {
  if (n < 2) return kNaNv;
  const std::size_t T = n - 1, t0 = late_window_start(n);
  const double m = static_cast<double>(T - t0 + 1);
  double tbar = 0, ybar = 0;
  for (std::size_t t = t0; t <= T; ++t) {
    tbar += static_cast<double>(t);
    ybar += y[t];
  }
  tbar /= m;
  ybar /= m;
  double num = 0, den = 0;
  for (std::size_t t = t0; t <= T; ++t) {
    const double dt = static_cast<double>(t) - tbar;
    num += dt * (y[t] - ybar);
    den += dt * dt;
  }
  return num / den;  // NaN propagates from any NaN y in the window
}

RegionRate region_rate(const Circuit& c, const std::vector<std::int64_t>& region, std::int64_t T,
                       const RegionRateOptions& opt) {
  if (T < 0) throw InvalidInput("region_rate: T = " + std::to_string(T) + " must be >= 0");
  if (opt.from_t < 0) throw InvalidInput("region_rate: from_t must be >= 0");
  if (c.L < 1) throw InvalidInput("region_rate: circuit has L = " + std::to_string(c.L));
  std::vector<char> in(static_cast<std::size_t>(c.L), 0);
  for (std::int64_t a : region) {
    if (a < 0 || a >= c.L)
      throw InvalidInput("region_rate: region site " + std::to_string(a) + " is outside [0, " +
                                  std::to_string(c.L) + ")");
    if (in[static_cast<std::size_t>(a)])
      throw InvalidInput("region_rate: region site " + std::to_string(a) + " is repeated");
    in[static_cast<std::size_t>(a)] = 1;
  }
  const SparseInt S = assemble_period(c);  // validates the circuit (ModelError)
  RegionRate out;
  const std::size_t nt = static_cast<std::size_t>(T) + 1;
  const auto k = static_cast<std::int64_t>(region.size());
  if (k == 0 || k == c.L) {  // Lambda_|A| is undefined there too
    out.log_volume.assign(nt, kNaNv);
    out.radius.assign(nt, kNaNv);
    out.rate = kNaNv;
    return out;
  }
  out.complement = 2 * k > c.L;
  std::vector<std::int64_t> sites;
  for (std::int64_t i = 0; i < c.L; ++i)
    if (static_cast<bool>(in[static_cast<std::size_t>(i)]) != out.complement) sites.push_back(i);
  out.sites = static_cast<std::int64_t>(sites.size());
  std::vector<std::int64_t> rows;
  for (std::int64_t a : sites) rows.push_back(a);         // q rows
  for (std::int64_t a : sites) rows.push_back(c.L + a);   // p rows
  Rows R(S, rows);
  slong prec = 128;
  out.log_volume.reserve(nt);
  out.radius.reserve(nt);
  out.bits.reserve(nt);
  out.columns.reserve(nt);
  for (std::int64_t t = 0; t <= T; ++t) {
    if (t > 0) R.step();
    double rad = kNaNv;
    out.log_volume.push_back(t >= opt.from_t ? R.log_volume(prec, rad, kTargetRelative) : kNaNv);
    out.radius.push_back(rad);
    out.bits.push_back(R.bits());
    out.columns.push_back(R.columns());
  }
  out.rate = late_slope(out.log_volume.data(), nt);
  return out;
}

double region_rate_work_bytes(const RegionRate& probe, std::int64_t t1, std::int64_t t2, std::int64_t T,
                              std::size_t region_size, std::int64_t L) {
  const auto n = probe.bits.size();
  if (!(t1 >= 0 && t1 < t2 && static_cast<std::size_t>(t2) < n && probe.columns.size() == n && T >= t2))
    throw InvalidInput("region_rate_work_bytes: need 0 <= t1 < t2 <= T within the probe curve");
  const auto u1 = static_cast<std::size_t>(t1), u2 = static_cast<std::size_t>(t2);
  auto at_T = [&](double a, double b) {
    return b + (b - a) * static_cast<double>(T - t2) / static_cast<double>(t2 - t1);
  };
  const double bits = std::max(64.0, at_T(static_cast<double>(probe.bits[u1]), static_cast<double>(probe.bits[u2])));
  const double cols = std::min(2.0 * static_cast<double>(L), at_T(static_cast<double>(probe.columns[u1]),
                                                                  static_cast<double>(probe.columns[u2])));
  const double m = static_cast<double>(std::min<std::int64_t>(static_cast<std::int64_t>(region_size),
                                                              L - static_cast<std::int64_t>(region_size)));
  const double rows = 2.0 * std::max(m, 0.0);
  // R_t twice during the update (fmpz limbs plus the mpz header), G_t with
  // entries of about 2 bits + log2(cols) bits, and FLINT's determinant work
  // (a few copies of G).
  const double exact = 2.0 * rows * cols * (bits / 8 + 32);
  const double gram = 4.0 * rows * rows * ((2 * bits + std::log2(std::max(cols, 1.0))) / 8 + 32);
  return exact + gram;
}

}  // namespace toral
