#include "real_roots.hpp"
#include "errors.hpp"

#include <acb_poly.h>
#include <arb.h>
#include <arf.h>
#include <flint/fmpz.h>
#include <flint/fmpz_poly.h>
#include <flint/fmpz_poly_factor.h>
#include <mag.h>

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <memory>
#include <numbers>
#include <stdexcept>
#include <string>
#include <utility>
#include <vector>

namespace toral {

namespace {

using flint::Ball;
using flint::CBall;
using flint::CVec;
using flint::Float;
using flint::Int;
using flint::Mag;
using flint::Poly;
using flint::PolyFactors;

// x^n in prec-bit floating point (n small: repeated squaring).
void arf_pow_ui_local(arf_t out, const arf_t x, ulong n, slong prec) {
  Float b, acc;
  arf_one(acc.get());
  arf_set(b.get(), x);
  while (n > 0) {
    if (n & 1) arf_mul(acc.get(), acc.get(), b.get(), prec, ARF_RND_NEAR);
    n >>= 1;
    if (n) arf_mul(b.get(), b.get(), b.get(), prec, ARF_RND_NEAR);
  }
  arf_swap(out, acc.get());
}

// Exact value of f at the dyadic z = m 2^e, scaled to an integer:
// returns v and the exponent x with f(z) = v 2^x (v = f(z) 2^(h d) for
// e = -h < 0, the Horner sum with c_i 2^(h (d - i)); v = f(z), x = 0 for
// e >= 0).
void eval_dyadic(fmpz_t v, slong& x, const fmpz_poly_t f, const fmpz_t m, slong e, fmpz_t tmp) {
  const slong d = fmpz_poly_degree(f);
  fmpz_set(v, fmpz_poly_get_coeff_ptr(f, d));
  if (e >= 0) {  // v z = (v m) 2^e: a short product and a shift, not a long product
    for (slong i = d - 1; i >= 0; --i) {
      fmpz_mul(v, v, m);
      fmpz_mul_2exp(v, v, static_cast<ulong>(e));
      fmpz_add(v, v, fmpz_poly_get_coeff_ptr(f, i));
    }
    x = 0;
    return;
  }
  const slong h = -e;
  for (slong i = d - 1; i >= 0; --i) {
    fmpz_mul(v, v, m);
    fmpz_mul_2exp(tmp, fmpz_poly_get_coeff_ptr(f, i), static_cast<ulong>(h * (d - i)));
    fmpz_add(v, v, tmp);
  }
  x = -h * d;
}

// A complex number (re + i im) 2^e with a double mantissa and a 64-bit
// exponent: Durand-Kerner on polynomials whose roots span thousands of
// binary orders of magnitude, where arb's additions of numbers of very
// different size cost a shift of the whole mantissa.
struct XComplex {
  double re = 0, im = 0;
  std::int64_t e = 0;
  bool zero() const { return re == 0 && im == 0; }
  void normalize() {
    const double m = std::max(std::fabs(re), std::fabs(im));
    if (m == 0) {
      e = 0;
      return;
    }
    int k = 0;
    std::frexp(m, &k);
    re = std::ldexp(re, -k);
    im = std::ldexp(im, -k);
    e += k;
  }
};
XComplex xmul(const XComplex& a, const XComplex& b) {
  XComplex r{a.re * b.re - a.im * b.im, a.re * b.im + a.im * b.re, a.e + b.e};
  r.normalize();
  return r;
}
XComplex xdiv(const XComplex& a, const XComplex& b) {
  const double den = b.re * b.re + b.im * b.im;
  XComplex r{(a.re * b.re + a.im * b.im) / den, (a.im * b.re - a.re * b.im) / den, a.e - b.e};
  r.normalize();
  return r;
}
XComplex xadd(const XComplex& a, const XComplex& b) {
  if (a.zero()) return b;
  if (b.zero()) return a;
  const std::int64_t d = a.e - b.e;
  if (d > 80) return a;
  if (d < -80) return b;
  XComplex r;
  if (d >= 0) {
    r = {a.re + std::ldexp(b.re, static_cast<int>(-d)), a.im + std::ldexp(b.im, static_cast<int>(-d)), a.e};
  } else {
    r = {std::ldexp(a.re, static_cast<int>(d)) + b.re, std::ldexp(a.im, static_cast<int>(d)) + b.im, b.e};
  }
  r.normalize();
  return r;
}
XComplex xneg(const XComplex& a) { return {-a.re, -a.im, a.e}; }


// ---- Descartes' rule of signs with bisection (Vincent-Collins-Akritas).

// An isolating interval of one positive root of a squarefree factor: the
// root is a 2^s exactly (exact), or lies in the open (a 2^s, (a+1) 2^s).
struct Isolated {
  Int a;
  slong s = 0;
  bool exact = false;
};

// Sign changes in the coefficients of (y + 1)^n P(1/(y + 1)), n = deg P: an
// upper bound on the roots of P in (0, 1), of the same parity; 0 and 1 are
// exact (Descartes; the bisection below ends for squarefree P by the
// two-circle theorem of Alesina and Galuzzi / Krandick and Mehlhorn).
slong descartes_variations(const fmpz_poly_struct* P) {
  const slong n = fmpz_poly_degree(P);
  Poly q;
  Int one;
  fmpz_one(one.get());
  fmpz_poly_reverse(q.get(), P, n + 1);
  fmpz_poly_taylor_shift(q.get(), q.get(), one.get());
  slong v = 0;
  int last = 0;
  for (slong i = 0; i <= fmpz_poly_degree(q.get()); ++i) {
    const int sg = fmpz_sgn(fmpz_poly_get_coeff_ptr(q.get(), i));
    if (sg == 0) continue;
    if (last != 0 && sg != last) ++v;
    last = sg;
  }
  return v;
}

// Isolating intervals of the positive roots of f: squarefree, degree >= 1,
// f(0) != 0. Exact integer arithmetic throughout.
void isolate_positive(std::vector<std::unique_ptr<Isolated>>& out, const fmpz_poly_struct* f) {
  const slong n = fmpz_poly_degree(f);
  // Cauchy: |root| < 1 + max_i<n |f_i| / |f_n| <= 2^K.
  slong maxbits = 0;
  for (slong i = 0; i < n; ++i)
    maxbits = std::max<slong>(maxbits, static_cast<slong>(fmpz_bits(fmpz_poly_get_coeff_ptr(f, i))));
  const slong K = std::max<slong>(1, maxbits - static_cast<slong>(fmpz_bits(fmpz_poly_lead(f))) + 2);
  // P(y) = f(2^K y): roots y in (0, 1). A node is the interval
  // y in (c / 2^k, (c + 1) / 2^k), i.e. x in (c 2^(K-k), (c + 1) 2^(K-k)),
  // and the polynomial whose roots in (0, 1) are those of f there.
  struct Node {
    Poly P;
    Int c;
    slong k = 0;
  };
  std::vector<std::unique_ptr<Node>> stack;
  stack.push_back(std::make_unique<Node>());
  fmpz_poly_set(stack.back()->P.get(), f);
  for (slong i = 1; i <= n; ++i)
    fmpz_mul_2exp(stack.back()->P.get()->coeffs + i, stack.back()->P.get()->coeffs + i, static_cast<ulong>(K * i));
  Int g;
  while (!stack.empty()) {
    std::unique_ptr<Node> node = std::move(stack.back());
    stack.pop_back();
    fmpz_poly_struct* P = node->P.get();
    if (fmpz_is_zero(fmpz_poly_get_coeff_ptr(P, 0))) {  // a root exactly at the left end
      out.push_back(std::make_unique<Isolated>());
      fmpz_set(out.back()->a.get(), node->c.get());
      out.back()->s = K - node->k;
      out.back()->exact = true;
      fmpz_poly_shift_right(P, P, 1);
    }
    const slong m = fmpz_poly_degree(P);
    if (m <= 0) continue;
    const slong v = descartes_variations(P);
    if (v == 0) continue;
    if (v == 1) {
      out.push_back(std::make_unique<Isolated>());
      fmpz_set(out.back()->a.get(), node->c.get());
      out.back()->s = K - node->k;
      continue;
    }
    // Left half: 2^m P(y / 2); right half: the same shifted by 1.
    auto left = std::make_unique<Node>(), right = std::make_unique<Node>();
    fmpz_poly_set(left->P.get(), P);
    for (slong i = 0; i < m; ++i)
      fmpz_mul_2exp(left->P.get()->coeffs + i, left->P.get()->coeffs + i, static_cast<ulong>(m - i));
    fmpz_poly_content(g.get(), left->P.get());
    if (!fmpz_is_one(g.get())) fmpz_poly_scalar_divexact_fmpz(left->P.get(), left->P.get(), g.get());
    fmpz_one(g.get());
    fmpz_poly_taylor_shift(right->P.get(), left->P.get(), g.get());
    fmpz_mul_2exp(left->c.get(), node->c.get(), 1);
    fmpz_add_ui(right->c.get(), left->c.get(), 1);
    left->k = right->k = node->k + 1;
    stack.push_back(std::move(right));
    stack.push_back(std::move(left));
  }
}

// Sign of f at a 2^s, exactly.
int dyadic_sign(const fmpz_poly_struct* f, const fmpz_t a, slong s, fmpz_t v, fmpz_t tmp) {
  slong x = 0;
  eval_dyadic(v, x, f, a, s, tmp);
  return fmpz_sgn(v);
}

// The ball of one isolated root of the squarefree f (df = f') refined by
// bisection on exact signs until arb_rel_accuracy_bits >= rel_bits.
void refine(arb_t ball, const Isolated& iso, const fmpz_poly_struct* f, const fmpz_poly_struct* df, slong rel_bits) {
  Int a, v, tmp, m;
  fmpz_set(a.get(), iso.a.get());
  slong s = iso.s;
  if (iso.exact) {
    arb_set_fmpz(ball, a.get());
    arb_mul_2exp_si(ball, ball, s);
    return;
  }
  // Sign of f on (lo, root): f(lo), or f'(lo) when lo is itself a (simple)
  // root of f, met exactly by a neighbouring interval.
  int s_lo = dyadic_sign(f, a.get(), s, v.get(), tmp.get());
  if (s_lo == 0) s_lo = dyadic_sign(df, a.get(), s, v.get(), tmp.get());
  for (;;) {
    if (static_cast<slong>(fmpz_bits(a.get())) > rel_bits + 1) {
      // [a 2^s, (a + 1) 2^s] = (2a + 1) 2^(s-1) +- 2^(s-1), exactly.
      fmpz_mul_2exp(m.get(), a.get(), 1);
      fmpz_add_ui(m.get(), m.get(), 1);
      arb_set_fmpz(ball, m.get());
      arb_mul_2exp_si(ball, ball, s - 1);
      mag_one(arb_radref(ball));
      mag_mul_2exp_si(arb_radref(ball), arb_radref(ball), s - 1);
      if (arb_rel_accuracy_bits(ball) >= rel_bits) return;
    }
    fmpz_mul_2exp(m.get(), a.get(), 1);
    fmpz_add_ui(m.get(), m.get(), 1);  // the midpoint m 2^(s-1)
    const int sm = dyadic_sign(f, m.get(), s - 1, v.get(), tmp.get());
    if (sm == 0) {  // the root itself
      arb_set_fmpz(ball, m.get());
      arb_mul_2exp_si(ball, ball, s - 1);
      return;
    }
    fmpz_mul_2exp(a.get(), a.get(), 1);
    if (sm == s_lo) fmpz_add_ui(a.get(), a.get(), 1);  // the root is in the right half
    --s;
  }
}

void check_bits(std::int64_t rel_bits, const char* who) {
  if (rel_bits < 1 || rel_bits > kMaxRootBits)
    throw RealRootsError(std::string(who) + ": rel_bits = " + std::to_string(rel_bits) + " is outside [1, " +
                         std::to_string(kMaxRootBits) + "]");
}

// p without its factor x^m (m returned); throws for the zero polynomial.
slong strip_zero_roots(fmpz_poly_struct* g, const fmpz_poly_struct* p, const char* who) {
  if (p == nullptr || fmpz_poly_is_zero(p))
    throw RealRootsError(std::string(who) + ": the zero polynomial (every x is a root)");
  slong m = 0;
  while (fmpz_is_zero(fmpz_poly_get_coeff_ptr(p, m))) ++m;
  fmpz_poly_shift_right(g, p, m);
  return m;
}

}  // namespace

// Certified enclosures of the d roots of f when they are real, positive and
// simple, to target_bits relative bits, without arb's root finder: starting
// points from the Newton polygon, Durand-Kerner in XComplex to about double
// precision, then per root Newton steps on the real line with f and f'
// evaluated exactly at dyadic points, and a proof by exact signs: f changes
// sign across each of d disjoint intervals [r (1 - 2^-b), r (1 + 2^-b)],
// b = target_bits + 8, so each holds exactly one root (f has degree d) and f
// is squarefree. False when any of that does not work out (roots closer than
// double precision can tell apart, a non-real approximation, a failed sign
// test); gaussian_exact then uses validated_positive_roots.
bool separated_positive_roots(acb_ptr roots, const fmpz_poly_struct* f, slong target_bits) {
  const slong d = fmpz_poly_degree(f), len = d + 1;
  if (d < 1) return false;
  const int lead = fmpz_sgn(fmpz_poly_lead(f));
  std::vector<XComplex> c(static_cast<std::size_t>(len));
  std::vector<double> l(static_cast<std::size_t>(len));
  for (slong i = 0; i < len; ++i) {
    const fmpz* ci = fmpz_poly_get_coeff_ptr(f, i);
    // All roots real and positive: the signs alternate.
    if (fmpz_sgn(ci) != ((d - i) % 2 == 0 ? lead : -lead)) return false;
    slong e = 0;
    const double mnt = fmpz_get_d_2exp(&e, ci);
    c[static_cast<std::size_t>(i)] = XComplex{mnt, 0.0, static_cast<std::int64_t>(e)};
    c[static_cast<std::size_t>(i)].normalize();
    l[static_cast<std::size_t>(i)] = std::log2(std::fabs(mnt)) + static_cast<double>(e);
  }
  // Starting points: on each edge of the upper hull of (i, log2 |f_i|), its
  // length in points on the circle of radius 2^-slope.
  std::vector<slong> hull;
  for (slong i = 0; i < len; ++i) {
    while (hull.size() >= 2) {
      const slong a = hull[hull.size() - 2], b = hull.back();
      if ((l[static_cast<std::size_t>(b)] - l[static_cast<std::size_t>(a)]) * static_cast<double>(i - a) <=
          (l[static_cast<std::size_t>(i)] - l[static_cast<std::size_t>(a)]) * static_cast<double>(b - a))
        hull.pop_back();
      else
        break;
    }
    hull.push_back(i);
  }
  std::vector<XComplex> z;
  for (std::size_t h = 0; h + 1 < hull.size(); ++h) {
    const slong a = hull[h], b = hull[h + 1], m = b - a;
    const double log2r = (l[static_cast<std::size_t>(a)] - l[static_cast<std::size_t>(b)]) / static_cast<double>(m);
    const double fl = std::floor(log2r), sc = std::exp2(log2r - fl);
    for (slong j = 0; j < m; ++j) {
      const double th = 2 * std::numbers::pi * static_cast<double>(j) / static_cast<double>(m) + 0.4;
      XComplex x{sc * std::cos(th), sc * std::sin(th), static_cast<std::int64_t>(fl)};
      x.normalize();
      z.push_back(x);
    }
  }
  if (static_cast<slong>(z.size()) != d) return false;
  // Durand-Kerner: z_i <- z_i - f(z_i) / (f_d prod_(j != i) (z_i - z_j)),
  // until the steps are at double precision or for a fixed number of sweeps
  // (close roots stall above it; the exact Newton steps below take over).
  bool converged = false;
  for (int it = 0; it < 60 + 10 * static_cast<int>(d) && !converged; ++it) {
    converged = true;
    for (slong i = 0; i < d; ++i) {
      XComplex p = c[static_cast<std::size_t>(d)];
      for (slong k = d - 1; k >= 0; --k) p = xadd(xmul(p, z[static_cast<std::size_t>(i)]), c[static_cast<std::size_t>(k)]);
      XComplex q = c[static_cast<std::size_t>(d)];
      for (slong j = 0; j < d; ++j)
        if (j != i) q = xmul(q, xadd(z[static_cast<std::size_t>(i)], xneg(z[static_cast<std::size_t>(j)])));
      if (q.zero()) return false;
      const XComplex step = xdiv(p, q);
      z[static_cast<std::size_t>(i)] = xadd(z[static_cast<std::size_t>(i)], xneg(step));
      // relative step size
      if (!step.zero() && static_cast<double>(step.e - z[static_cast<std::size_t>(i)].e) > -44) converged = false;
    }
  }
  for (const XComplex& x : z)
    if (!(x.re > 0) || std::fabs(x.im) > std::ldexp(x.re, -20)) return false;  // not real and positive
  std::sort(z.begin(), z.end(), [](const XComplex& a, const XComplex& b) {
    return a.e != b.e ? a.e < b.e : a.re < b.re;  // normalized: the exponent orders first
  });
  const slong bits = target_bits + 8, wp = bits + 64;
  Int m, v, tmp;
  Float r, q, x, y, pv, dv, pw, term;
  std::vector<Float> cw(static_cast<std::size_t>(len));  // the coefficients rounded to wp bits
  for (slong i = 0; i < len; ++i)
    arf_set_round_fmpz(cw[static_cast<std::size_t>(i)].get(), fmpz_poly_get_coeff_ptr(f, i), wp, ARF_RND_NEAR);
  std::vector<Float> lo(static_cast<std::size_t>(d)), hi(static_cast<std::size_t>(d));
  auto sign_at = [&](const arf_t at) {
    slong e = 0, xv = 0;
    arf_get_fmpz_2exp(m.get(), &e, at);
    eval_dyadic(v.get(), xv, f, m.get(), e, tmp.get());
    return fmpz_sgn(v.get());
  };
  std::vector<slong> keep;
  for (slong j = 0; j < d; ++j) {
    arf_set_d(r.get(), z[static_cast<std::size_t>(j)].re);
    arf_mul_2exp_si(r.get(), r.get(), static_cast<slong>(z[static_cast<std::size_t>(j)].e));
    // Near this root only the terms within wp + 20 bits of the largest
    // |f_i r^i| matter for the Newton steps (the proof below is exact).
    const double s = static_cast<double>(z[static_cast<std::size_t>(j)].e);
    double top = -INFINITY;
    for (slong i = 0; i < len; ++i) top = std::max(top, l[static_cast<std::size_t>(i)] + s * static_cast<double>(i));
    keep.clear();
    for (slong i = 0; i < len; ++i)
      if (l[static_cast<std::size_t>(i)] + s * static_cast<double>(i) > top - static_cast<double>(wp + 20)) keep.push_back(i);
    bool settled = false;
    for (int it = 0; it < 40 && !settled; ++it) {
      // f(r) and f'(r) over the kept terms, in wp-bit floating point.
      arf_zero(pv.get());
      arf_zero(dv.get());
      for (slong i : keep) {
        arf_pow_ui_local(pw.get(), r.get(), static_cast<ulong>(i), wp);
        arf_mul(term.get(), cw[static_cast<std::size_t>(i)].get(), pw.get(), wp, ARF_RND_NEAR);
        arf_add(pv.get(), pv.get(), term.get(), wp, ARF_RND_NEAR);
        if (i > 0) {
          arf_pow_ui_local(pw.get(), r.get(), static_cast<ulong>(i - 1), wp);
          arf_mul(term.get(), cw[static_cast<std::size_t>(i)].get(), pw.get(), wp, ARF_RND_NEAR);
          arf_mul_ui(term.get(), term.get(), static_cast<ulong>(i), wp, ARF_RND_NEAR);
          arf_add(dv.get(), dv.get(), term.get(), wp, ARF_RND_NEAR);
        }
      }
      if (arf_is_zero(pv.get())) {
        settled = true;
        break;
      }
      if (arf_is_zero(dv.get())) return false;
      arf_div(q.get(), pv.get(), dv.get(), wp, ARF_RND_NEAR);  // f(r) / f'(r)
      arf_sub(r.get(), r.get(), q.get(), wp, ARF_RND_NEAR);
      if (arf_sgn(r.get()) <= 0) return false;
      arf_abs(q.get(), q.get());
      arf_mul_2exp_si(x.get(), r.get(), -(bits + 16));
      settled = arf_cmp(q.get(), x.get()) < 0;  // |step| < r 2^-(bits + 16)
    }
    if (!settled) return false;
    // [r (1 - 2^-bits), r (1 + 2^-bits)], dyadic ends rounded outwards.
    arf_mul_2exp_si(x.get(), r.get(), -bits);
    arf_sub(lo[static_cast<std::size_t>(j)].get(), r.get(), x.get(), wp + 8, ARF_RND_DOWN);
    arf_add(hi[static_cast<std::size_t>(j)].get(), r.get(), x.get(), wp + 8, ARF_RND_UP);
    const int s_lo = sign_at(lo[static_cast<std::size_t>(j)].get()), s_hi = sign_at(hi[static_cast<std::size_t>(j)].get());
    if (s_lo == 0 || s_hi == 0 || s_lo == s_hi) return false;
    if (j > 0 && arf_cmp(hi[static_cast<std::size_t>(j - 1)].get(), lo[static_cast<std::size_t>(j)].get()) >= 0) return false;
    // Midpoint r, radius r 2^(1-bits): the ball covers the interval (whose
    // ends were rounded outwards by far less than r 2^-bits).
    arb_set_arf(acb_realref(roots + j), r.get());
    arf_mul_2exp_si(x.get(), x.get(), 1);
    arb_add_error_arf(acb_realref(roots + j), x.get());
    arb_zero(acb_imagref(roots + j));
  }
  return true;  // d disjoint sign changes of a degree-d polynomial: one simple root in each
}

// Certified enclosures of the d roots of a squarefree integer polynomial f
// whose roots are all real and positive (in gaussian_exact z_j = mu_j^2 - Den^2
// > 0), each to at least `target_bits` relative bits, written to roots (imaginary parts
// exactly 0). The roots span hundreds of orders of magnitude, which makes
// generic starting points (as in arb_fmpz_poly_complex_roots) very slow, so
// the starting points come from the Newton polygon of f (|z| ~ 2^-slope on
// each edge, spread on a circle as in Bini's method); arb then refines them
// (Durand-Kerner sweeps), isolates them rigorously
// (_acb_poly_validate_roots) and proves them real
// (_acb_poly_validate_real_roots). Returns false if that did not succeed
// within max_tries precision doublings, or if a root is not real (which theory
// excludes); gaussian_exact then uses arb_fmpz_poly_complex_roots.
bool validated_positive_roots(acb_ptr roots, const fmpz_poly_struct* f, slong target_bits, int max_tries) {
  const slong d = fmpz_poly_degree(f), len = d + 1;
  if (d < 1) return false;
  std::vector<double> l(static_cast<std::size_t>(len));
  for (slong i = 0; i < len; ++i) {
    const fmpz* c = fmpz_poly_get_coeff_ptr(f, i);
    if (fmpz_is_zero(c)) return false;  // impossible with all roots > 0
    slong e = 0;
    const double m = fmpz_get_d_2exp(&e, c);
    l[static_cast<std::size_t>(i)] = std::log2(std::fabs(m)) + static_cast<double>(e);
  }
  // Upper convex hull of (i, log2 |f_i|).
  std::vector<slong> hull;
  for (slong i = 0; i < len; ++i) {
    while (hull.size() >= 2) {
      const slong a = hull[hull.size() - 2], b = hull.back();
      const double la = l[static_cast<std::size_t>(a)], lb = l[static_cast<std::size_t>(b)],
                   lc = l[static_cast<std::size_t>(i)];
      if ((lb - la) * static_cast<double>(i - a) <= (lc - la) * static_cast<double>(b - a))
        hull.pop_back();
      else
        break;
    }
    hull.push_back(i);
  }
  CVec init(d), poly(len), prev(d);
  CBall step;
  Mag ms, mr;
  {
    slong idx = 0;
    Ball re, im;
    for (std::size_t h = 0; h + 1 < hull.size(); ++h) {
      const slong a = hull[h], b = hull[h + 1], m = b - a;
      const double log2r =
          (l[static_cast<std::size_t>(a)] - l[static_cast<std::size_t>(b)]) / static_cast<double>(m);
      const double fl = std::floor(log2r);
      for (slong j = 0; j < m; ++j) {
        const double th = 2 * std::numbers::pi * static_cast<double>(j) / static_cast<double>(m) + 0.4;
        const double sc = std::exp2(log2r - fl);
        arb_set_d(re.get(), sc * std::cos(th));
        arb_set_d(im.get(), sc * std::sin(th));
        arb_mul_2exp_si(re.get(), re.get(), static_cast<slong>(fl));
        arb_mul_2exp_si(im.get(), im.get(), static_cast<slong>(fl));
        acb_set_arb_arb(init.get() + idx, re.get(), im.get());
        ++idx;
      }
    }
    if (idx != d) return false;
  }
  for (slong prec = target_bits + 32, tries = 0; tries < max_tries; prec *= 2, ++tries) {
    for (slong i = 0; i < len; ++i) acb_set_round_fmpz(poly.get() + i, fmpz_poly_get_coeff_ptr(f, i), prec);
    // Durand-Kerner sweeps until every root moved by < 2^(16-prec) relative
    // (_acb_poly_find_roots stops on an absolute criterion, which leaves the
    // small roots of such wide-range polynomials unconverged).
    for (slong i = 0; i < d; ++i) acb_set(roots + i, init.get() + i);
    for (slong it = 0; it < 40 + 10 * d; ++it) {
      for (slong i = 0; i < d; ++i) acb_get_mid(prev.get() + i, roots + i);
      _acb_poly_refine_roots_durand_kerner(roots, poly.get(), len, prec);
      bool moved = false;
      for (slong i = 0; i < d && !moved; ++i) {
        acb_sub(step.get(), roots + i, prev.get() + i, prec);
        acb_get_mag(ms.get(), step.get());
        acb_get_mag_lower(mr.get(), roots + i);
        mag_mul_2exp_si(mr.get(), mr.get(), 16 - prec);
        moved = mag_cmp(ms.get(), mr.get()) > 0;
      }
      if (!moved) break;
    }
    const slong isolated = _acb_poly_validate_roots(roots, poly.get(), len, prec);
    // As in arb_fmpz_poly_complex_roots: with all roots isolated,
    // _acb_poly_validate_real_roots proves that each enclosure meeting the
    // real line holds a real root; then its imaginary part is exactly 0.
    bool ok = isolated == d && _acb_poly_validate_real_roots(roots, poly.get(), len, prec);
    for (slong i = 0; i < d && ok; ++i)
      if (!arb_contains_zero(acb_imagref(roots + i))) ok = false;  // non-real: leave to the fallback
    for (slong i = 0; i < d && ok; ++i)
      if (!arb_is_positive(acb_realref(roots + i)) ||
          arb_rel_accuracy_bits(acb_realref(roots + i)) < target_bits)
        ok = false;
    if (ok) {
      for (slong i = 0; i < d; ++i) arb_zero(acb_imagref(roots + i));
      return true;
    }
    for (slong i = 0; i < d; ++i) acb_get_mid(init.get() + i, roots + i);  // restart from here
  }
  return false;
}

std::pair<double, double> ball_to_double(const arb_struct* x) {
  const double mid = arf_get_d(arb_midref(x), ARF_RND_NEAR);
  Ball err;
  arb_set_d(err.get(), mid);
  arb_sub(err.get(), x, err.get(), 2 * arf_bits(arb_midref(x)) + 64);
  Float ub;
  arb_get_abs_ubound_arf(ub.get(), err.get(), 64);
  return {mid, arf_get_d(ub.get(), ARF_RND_UP)};
}

std::int64_t PositiveRoots::count_with_multiplicity() const {
  std::int64_t n = 0;
  for (std::int64_t m : multiplicity) n += m;
  return n;
}

PositiveRoots positive_roots(const fmpz_poly_struct* p, std::int64_t rel_bits, const RootOptions& opt) {
  check_bits(rel_bits, "positive_roots");
  PositiveRoots out;
  Poly g;
  out.at_zero = strip_zero_roots(g.get(), p, "positive_roots");
  out.degree = fmpz_poly_degree(p);
  if (fmpz_poly_degree(g.get()) <= 0) return out;
  PolyFactors fac;
  fmpz_poly_factor_squarefree(fac.get(), g.get());
  // Roots of different squarefree factors are distinct, but their balls may
  // still overlap: then everything is redone at twice the bits.
  for (slong bits = static_cast<slong>(rel_bits);; bits *= 2) {
    struct Found {
      std::unique_ptr<Ball> ball;
      std::int64_t mult;
    };
    std::vector<Found> found;
    for (slong i = 0; i < fac.get()->num; ++i) {
      const fmpz_poly_struct* f = fac.get()->p + i;
      const slong d = fmpz_poly_degree(f);
      if (d <= 0) continue;
      const std::int64_t e = fac.get()->exp[i];
      if (opt.fast) {
        CVec z(d);
        if (separated_positive_roots(z.get(), f, bits)) {
          for (slong j = 0; j < d; ++j) {
            found.push_back({std::make_unique<Ball>(), e});
            arb_set(found.back().ball->get(), acb_realref(z[j]));
          }
          continue;
        }
      }
      std::vector<std::unique_ptr<Isolated>> iso;
      isolate_positive(iso, f);
      Poly df;
      fmpz_poly_derivative(df.get(), f);
      for (const auto& it : iso) {
        found.push_back({std::make_unique<Ball>(), e});
        refine(found.back().ball->get(), *it, f, df.get(), bits);
      }
    }
    std::sort(found.begin(), found.end(), [](const Found& a, const Found& b) {
      return arf_cmp(arb_midref(a.ball->get()), arb_midref(b.ball->get())) < 0;
    });
    bool disjoint = true;
    for (std::size_t j = 1; j < found.size() && disjoint; ++j)
      disjoint = !arb_overlaps(found[j - 1].ball->get(), found[j].ball->get());
    if (!disjoint) {
      if (2 * bits > kMaxRootBits)
        throw SolverError("positive_roots: roots of different squarefree factors not separated within " +
                                 std::to_string(kMaxRootBits) + " bits");
      continue;
    }
    for (Found& f : found) {
      const auto [mid, rad] = ball_to_double(f.ball->get());
      out.mid.push_back(mid);
      out.radius.push_back(rad);
      out.multiplicity.push_back(f.mult);
      out.balls.push_back(std::move(f.ball));
    }
    return out;
  }
}

PositiveRoots positive_roots(const std::vector<std::int64_t>& coeffs, std::int64_t rel_bits, const RootOptions& opt) {
  Poly p;
  for (std::size_t i = 0; i < coeffs.size(); ++i)
    fmpz_poly_set_coeff_si(p.get(), static_cast<slong>(i), static_cast<slong>(coeffs[i]));
  return positive_roots(p.get(), rel_bits, opt);
}

std::int64_t positive_root_count(const fmpz_poly_struct* p) {
  Poly g;
  strip_zero_roots(g.get(), p, "positive_root_count");
  if (fmpz_poly_degree(g.get()) <= 0) return 0;
  PolyFactors fac;
  fmpz_poly_factor_squarefree(fac.get(), g.get());
  std::int64_t n = 0;
  for (slong i = 0; i < fac.get()->num; ++i) {
    if (fmpz_poly_degree(fac.get()->p + i) <= 0) continue;
    std::vector<std::unique_ptr<Isolated>> iso;
    isolate_positive(iso, fac.get()->p + i);
    n += static_cast<std::int64_t>(iso.size());
  }
  return n;
}

}  // namespace toral
