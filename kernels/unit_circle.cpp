#include "unit_circle.hpp"
#include "errors.hpp"

#include <arb_fmpz_poly.h>
#include <flint/fmpz_mat.h>
#include <flint/fmpz_poly_factor.h>

#include <algorithm>
#include <cmath>

#include <stdexcept>
#include <string>

#include "flint_raii.hpp"

namespace toral {
namespace {

using flint::Int;
using flint::Poly;

// Divides out every factor (x - r), r = +-1, and returns its multiplicity.
std::int64_t strip_root(fmpz_poly_struct* p, slong r) {
  Poly lin, q, rem;
  fmpz_poly_set_coeff_si(lin.get(), 1, 1);
  fmpz_poly_set_coeff_si(lin.get(), 0, -r);
  std::int64_t mult = 0;
  while (fmpz_poly_degree(p) > 0) {
    fmpz_poly_divrem(q.get(), rem.get(), p, lin.get());
    if (!fmpz_poly_is_zero(rem.get())) break;
    fmpz_poly_swap(p, q.get());
    ++mult;
  }
  return mult;
}

bool palindromic(const fmpz_poly_struct* h) {
  const slong n = fmpz_poly_length(h);
  for (slong i = 0; i < n / 2; ++i)
    if (!fmpz_equal(h->coeffs + i, h->coeffs + (n - 1 - i))) return false;
  return true;
}

}  // namespace

void trace_polynomial(fmpz_poly_struct* T, const fmpz_poly_struct* h) {
  const slong deg = fmpz_poly_degree(h);
  if (deg < 0 || deg % 2 != 0 || !palindromic(h))
    throw InvalidInput("trace_polynomial: needs a palindromic polynomial of even degree");
  const slong m = deg / 2;
  // x^j + x^-j = V_j(y), y = x + 1/x: V_0 = 2, V_1 = y, V_{j+1} = y V_j - V_{j-1}
  // (Dickson polynomials). h / x^m = a_m + sum_{j>=1} a_{m+j} V_j(y).
  Poly v0, v1, v2, y;
  fmpz_poly_set_si(v0.get(), 2);
  fmpz_poly_set_coeff_si(y.get(), 1, 1);
  fmpz_poly_set(v1.get(), y.get());
  fmpz_poly_zero(T);
  fmpz_poly_set_coeff_fmpz(T, 0, h->coeffs + m);
  for (slong j = 1; j <= m; ++j) {
    fmpz_poly_scalar_addmul_fmpz(T, v1.get(), h->coeffs + m + j);
    fmpz_poly_shift_left(v2.get(), v1.get(), 1);
    fmpz_poly_sub(v2.get(), v2.get(), v0.get());
    fmpz_poly_swap(v0.get(), v1.get());
    fmpz_poly_swap(v1.get(), v2.get());
  }
}

std::int64_t roots_between_minus2_and_2(const fmpz_poly_struct* f) {
  const slong d = fmpz_poly_degree(f);
  if (d < 1) return 0;
  // y = 2 (t - 1) / (t + 1) maps t in (0, inf) onto y in (-2, 2). With
  // u = y / 2 and s = t + 1: u = 1 - 2 / s, so
  //   R(t) = s^d f(2 - 4/s) = rev_d(Q)(s),  Q(w) = f(2 - 4 w),
  // then s -> t + 1. Two Taylor shifts and a scaling, all exact.
  Poly q, r;
  Int two;
  fmpz_set_ui(two.get(), 2);
  fmpz_poly_taylor_shift(q.get(), f, two.get());  // f(y + 2)
  // y = -4 w: coefficient j times (-4)^j
  Int scale;
  fmpz_one(scale.get());
  for (slong j = 0; j <= d; ++j) {
    fmpz_mul(q.get()->coeffs + j, q.get()->coeffs + j, scale.get());
    fmpz_mul_si(scale.get(), scale.get(), -4);
  }
  fmpz_poly_reverse(r.get(), q.get(), d + 1);  // s^d Q(1/s)
  Int one;
  fmpz_one(one.get());
  fmpz_poly_taylor_shift(r.get(), r.get(), one.get());  // s = t + 1
  if (fmpz_poly_degree(r.get()) != d || fmpz_is_zero(r.get()->coeffs))
    throw InvalidInput("roots_between_minus2_and_2: f vanishes at -2 or 2");
  slong neg = 0, pos = 0;
  _fmpz_poly_num_real_roots_sturm(&neg, &pos, r.get()->coeffs, fmpz_poly_length(r.get()));
  return static_cast<std::int64_t>(pos);
}

void circle_trace_polynomial(fmpz_poly_struct* T, const fmpz_poly_struct* p, CircleCensus& c) {
  if (fmpz_poly_is_zero(p)) throw InvalidInput("circle_census: zero polynomial");
  c = CircleCensus{};
  c.degree = fmpz_poly_degree(p);
  Poly a, rev, g;
  // Roots at 0 first (rev p would lose them).
  slong z = 0;
  while (fmpz_is_zero(p->coeffs + z)) ++z;
  c.at_zero = z;
  fmpz_poly_shift_right(a.get(), p, z);
  fmpz_poly_reverse(rev.get(), a.get(), fmpz_poly_length(a.get()));
  fmpz_poly_gcd(g.get(), a.get(), rev.get());
  c.at_one = strip_root(g.get(), 1);
  c.at_minus_one = strip_root(g.get(), -1);
  c.on_circle = c.at_one + c.at_minus_one;
  if (fmpz_poly_degree(g.get()) <= 0) {
    fmpz_poly_one(T);
    return;
  }
  // g is now palindromic up to sign, and -1 (anti-palindromic) would force
  // the root 1, which is gone.
  if (!palindromic(g.get())) {
    fmpz_poly_neg(g.get(), g.get());
    if (!palindromic(g.get()))
      throw std::logic_error("circle_census: gcd(p, rev p) without +-1 is not palindromic");
  }
  trace_polynomial(T, g.get());
}

CircleCensus circle_census(const fmpz_poly_struct* p) {
  CircleCensus c;
  Poly T;
  circle_trace_polynomial(T.get(), p, c);
  flint::PolyFactors fac;
  fmpz_poly_factor_squarefree(fac.get(), T.get());
  for (slong i = 0; i < fac.get()->num; ++i)
    c.on_circle += 2 * fac.get()->exp[i] * roots_between_minus2_and_2(fac.get()->p + i);
  return c;
}

CircleCensus circle_census(const std::vector<std::int64_t>& coeffs) {
  Poly p;
  for (std::size_t i = 0; i < coeffs.size(); ++i)
    fmpz_poly_set_coeff_si(p.get(), static_cast<slong>(i), static_cast<slong>(coeffs[i]));
  return circle_census(p.get());
}

void integer_charpoly(fmpz_poly_struct* out, const SparseInt& A) {
  flint::Mat m(static_cast<slong>(A.n), static_cast<slong>(A.n));
  for (std::int64_t i = 0; i < A.n; ++i)
    for (std::int64_t k = A.rowptr[static_cast<std::size_t>(i)]; k < A.rowptr[static_cast<std::size_t>(i + 1)]; ++k)
      fmpz_set_si(fmpz_mat_entry(m.get(), i, A.col[static_cast<std::size_t>(k)]),
                  static_cast<slong>(A.val[static_cast<std::size_t>(k)]));
  // Issue 10 reports that FLINT 2.9's fmpz_mat_charpoly misbehaves when the
  // output already holds a polynomial (not reproduced with Debian's 2.9.0-5
  // on random matrices up to 60 x 60); start from zero regardless.
  fmpz_poly_zero(out);
  fmpz_mat_charpoly(out, m.get());
}

bool certified_log_moduli(const fmpz_poly_struct* p, const CircleCensus& census,
                          std::vector<std::pair<double, double>>& out, long max_prec) {
  if (census.at_zero != 0) throw InvalidInput("certified_log_moduli: p(0) = 0");
  flint::PolyFactors fac;
  fmpz_poly_factor_squarefree(fac.get(), p);
  for (slong prec = 64; prec <= max_prec; prec *= 2) {
    out.clear();
    std::int64_t candidates = 0;
    bool finite = true;
    for (slong i = 0; i < fac.get()->num && finite; ++i) {
      const fmpz_poly_struct* f = fac.get()->p + i;
      const slong d = fmpz_poly_degree(f), e = fac.get()->exp[i];
      flint::CVec roots(d);
      arb_fmpz_poly_complex_roots(roots.get(), f, 0, prec);
      flint::Ball a;
      for (slong j = 0; j < d; ++j) {
        acb_abs(a.get(), roots[j], prec);
        arb_log(a.get(), a.get(), prec);
        if (!arb_is_finite(a.get())) {
          finite = false;
          break;
        }
        const bool zero = arb_contains_zero(a.get());
        const double mid = zero ? 0.0 : arf_get_d(arb_midref(a.get()), ARF_RND_NEAR);
        // radius of the ball plus the rounding of its midpoint to double
        const double rad = zero ? 0.0 : mag_get_d(arb_radref(a.get())) + 1.2e-16 * std::abs(mid);
        for (slong k = 0; k < e; ++k) out.emplace_back(mid, rad);
        candidates += zero ? e : 0;
      }
    }
    if (finite && candidates == census.on_circle) return true;
  }
  out.clear();
  return false;
}

ExactSpectrum exact_spectrum(const Circuit& c, bool certify) {
  const bool pos = c.position_class();
  const SparseInt A = pos ? assemble_position_block(c) : assemble_period(c);
  Poly p;
  integer_charpoly(p.get(), A);
  const CircleCensus cc = circle_census(p.get());
  if (cc.at_zero != 0) throw std::logic_error("exact_spectrum: singular one-period matrix");
  ExactSpectrum out;
  out.zero_exponents = pos ? 2 * cc.on_circle : cc.on_circle;
  if (certify) {
    std::vector<std::pair<double, double>> lm;
    if (certified_log_moduli(p.get(), cc, lm)) {
      out.exponents = lm;
      if (pos)
        for (const auto& [v, r] : lm) out.exponents.emplace_back(-v, r);
      std::sort(out.exponents.begin(), out.exponents.end(),
                [](const auto& x, const auto& y) { return x.first > y.first; });
    }
  }
  return out;
}

std::int64_t exact_zero_exponents(const Circuit& c) { return exact_spectrum(c, false).zero_exponents; }

}  // namespace toral
