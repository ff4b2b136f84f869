#include "bloch_exact.hpp"
#include "errors.hpp"

#include <arb_fmpz_poly.h>
#include <flint/fmpz_poly_factor.h>

#include <algorithm>
#include <cmath>
#include <map>
#include <numbers>
#include <numeric>
#include <stdexcept>
#include <string>

#include "flint_raii.hpp"
#include "unit_circle.hpp"

namespace toral {
namespace {

using flint::Ball;
using flint::CBall;
using flint::CPoly;
using flint::CVec;
using flint::Int;
using flint::MPoly;
using flint::MPolyCtx;
using flint::Poly;

constexpr double kPi = std::numbers::pi;
constexpr slong kLambda = 0, kZ = 1;  // variable indices
constexpr slong kStartPrec = 96, kMaxPrec = 4096;

// A polynomial in lambda whose coefficients are integer polynomials in z.
struct LambdaPoly {
  std::vector<std::unique_ptr<Poly>> c;  // c[j] multiplies lambda^j
  std::int64_t mult = 1;                 // multiplicity in F
  slong degree() const { return static_cast<slong>(c.size()) - 1; }
};

LambdaPoly split_by_lambda(const fmpz_mpoly_struct* f, const fmpz_mpoly_ctx_struct* ctx) {
  LambdaPoly out;
  const slong dl = fmpz_mpoly_degree_si(f, kLambda, ctx);
  for (slong j = 0; j <= dl; ++j) out.c.push_back(std::make_unique<Poly>());
  Int coef;
  for (slong i = 0; i < fmpz_mpoly_length(f, ctx); ++i) {
    const slong el = fmpz_mpoly_get_term_var_exp_si(f, i, kLambda, ctx);
    const slong ez = fmpz_mpoly_get_term_var_exp_si(f, i, kZ, ctx);
    fmpz_mpoly_get_term_coeff_fmpz(coef.get(), f, i, ctx);
    Poly& p = *out.c[static_cast<std::size_t>(el)];
    Int old;
    fmpz_poly_get_coeff_fmpz(old.get(), p.get(), ez);
    fmpz_add(old.get(), old.get(), coef.get());
    fmpz_poly_set_coeff_fmpz(p.get(), ez, old.get());
  }
  return out;
}

// c(z) in acb for a z ball.
void evaluate(CPoly& out, const LambdaPoly& f, const acb_t z, slong prec) {
  acb_poly_zero(out.get());
  CPoly tmp;
  CBall v;
  for (slong j = 0; j <= f.degree(); ++j) {
    acb_poly_set_fmpz_poly(tmp.get(), f.c[static_cast<std::size_t>(j)]->get(), prec);
    acb_poly_evaluate(v.get(), tmp.get(), z, prec);
    acb_poly_set_coeff_acb(out.get(), j, v.get());
  }
}

// One eigenvalue enclosure and the factor it belongs to.
struct RootBall {
  std::unique_ptr<CBall> ball;
  std::int64_t mult = 1;
};

// Isolated root enclosures of every factor at z; false if some factor's roots
// cannot be isolated at this precision.
bool factor_roots(std::vector<RootBall>& roots, const std::vector<LambdaPoly>& factors, const acb_t z, slong prec) {
  roots.clear();
  for (const LambdaPoly& f : factors) {
    CPoly p;
    evaluate(p, f, z, prec);
    const slong d = acb_poly_degree(p.get());
    if (d != f.degree()) return false;  // leading coefficient not certified nonzero
    CVec r(d);
    if (acb_poly_find_roots(r.get(), p.get(), nullptr, 0, prec) < d) return false;
    for (slong i = 0; i < d; ++i) {
      RootBall rb;
      rb.ball = std::make_unique<CBall>();
      acb_set(rb.ball->get(), r[i]);
      rb.mult = f.mult;
      roots.push_back(std::move(rb));
    }
  }
  // Roots of different factors must be disjoint too (F's squarefree part has
  // simple roots away from kinks).
  for (std::size_t i = 0; i < roots.size(); ++i)
    for (std::size_t j = i + 1; j < roots.size(); ++j)
      if (acb_overlaps(roots[i].ball->get(), roots[j].ball->get())) return false;
  return true;
}

// Place of each root relative to the unit circle: -1 inside, +1 outside, 0
// exactly on it; false when undecided at this precision. `on` needs the
// partner symmetry mu -> 1/conj(mu) of the whole root set.
bool classify(std::vector<int>& where, const std::vector<RootBall>& roots, slong prec) {
  where.assign(roots.size(), 2);
  Ball a, one;
  arb_one(one.get());
  CBall partner;
  for (std::size_t i = 0; i < roots.size(); ++i) {
    const acb_struct* r = roots[i].ball->get();
    acb_abs(a.get(), r, prec);
    if (arb_gt(a.get(), one.get())) {
      where[i] = 1;
      continue;
    }
    if (arb_lt(a.get(), one.get())) {
      where[i] = -1;
      continue;
    }
    acb_conj(partner.get(), r);
    acb_inv(partner.get(), partner.get(), prec);
    bool alone = acb_overlaps(partner.get(), r);
    for (std::size_t j = 0; j < roots.size() && alone; ++j)
      if (j != i && acb_overlaps(partner.get(), roots[j].ball->get())) alone = false;
    if (!alone) return false;
    where[i] = 0;
  }
  return true;
}

// z = (y + i sqrt(4 - y^2)) / 2 for a dyadic y in (-2, 2): exactly on the
// circle, exp(i k) with k = arccos(y / 2).
void z_from_trace(acb_t z, double y, slong prec) {
  arb_t s;
  arb_init(s);
  arb_set_d(s, y);
  arb_sqr(s, s, prec);
  arb_neg(s, s);
  arb_add_ui(s, s, 4, prec);
  arb_sqrt(acb_imagref(z), s, prec);
  arb_set_d(acb_realref(z), y);
  acb_mul_2exp_si(z, z, -1);
  arb_clear(s);
}

}  // namespace

struct BlochExact::Impl {
  MPolyCtx ctx{2};
  std::unique_ptr<MPoly> F;            // z^s det(lambda - M(z)), not divisible by z
  std::vector<LambdaPoly> factors;     // squarefree factorisation (lambda-degree >= 1)
  std::vector<BlochArc> arcs;
  std::vector<double> kinks;
  std::vector<double> kink_traces;     // y = 2 cos k of each kink, descending (= k ascending)
  std::vector<double> kink_trace_rad;  // certified radius of each y
  std::vector<std::int64_t> orders;    // root-of-unity kink orders
  mutable std::map<std::int64_t, std::int64_t> orbit_zeros;  // d -> zero exponents over order-d momenta

  void build(const Mat4& G, const Mat2* site);
  void find_kinks(const fmpz_poly_struct* D);
  int count_at_trace(double y) const;
  std::int64_t orbit_total(std::int64_t d) const;
  void orbit_polynomial(fmpz_poly_struct* r, std::int64_t d) const;
  template <class MakeZ>
  bool exponents_at(MakeZ&& make_z, double value[4], double radius[4]) const;
};

void BlochExact::Impl::build(const Mat4& G, const Mat2* site) {
  auto* c = ctx.get();
  auto mono = [&](MPoly& out, std::int64_t coef, slong zpow) {
    fmpz_mpoly_zero(out.get(), c);
    if (coef == 0) return;
    Int v;
    fmpz_set_si(v.get(), static_cast<slong>(coef));
    ulong exp[2] = {0, static_cast<ulong>(zpow)};
    fmpz_mpoly_set_coeff_fmpz_ui(out.get(), v.get(), exp, c);
  };
  // z * Odd(z) on (X, Y) = [[z G22, G21], [z^2 G12, z G11]] (2x2 blocks of G
  // on (a, b)); N(z) = Site * (z Odd(z)) * G = z M(z).
  std::vector<std::unique_ptr<MPoly>> zodd(16), N(16), T(16);
  for (int i = 0; i < 4; ++i)
    for (int j = 0; j < 4; ++j) {
      // Block (bi, bj) of z Odd: (0,0) z G22 = z G(2+ii, 2+jj); (0,1) G21 =
      // G(2+ii, jj); (1,0) z^2 G12 = z^2 G(ii, 2+jj); (1,1) z G11 = z G(ii, jj).
      const int bi = i / 2, bj = j / 2, ii = i % 2, jj = j % 2;
      const slong zp = bi == 0 ? (bj == 0 ? 1 : 0) : (bj == 0 ? 2 : 1);
      const int row = bi == 0 ? 2 + ii : ii;
      const int col = bj == 0 ? 2 + jj : jj;
      zodd[i * 4 + j] = std::make_unique<MPoly>(ctx);
      mono(*zodd[i * 4 + j], G(row, col), zp);
    }
  MPoly tmp(ctx);
  for (int i = 0; i < 4; ++i)
    for (int j = 0; j < 4; ++j) {
      T[i * 4 + j] = std::make_unique<MPoly>(ctx);
      for (int l = 0; l < 4; ++l) {
        fmpz_mpoly_scalar_mul_si(tmp.get(), zodd[i * 4 + l]->get(), static_cast<slong>(G(l, j)), c);
        fmpz_mpoly_add(T[i * 4 + j]->get(), T[i * 4 + j]->get(), tmp.get(), c);
      }
    }
  for (int i = 0; i < 4; ++i)
    for (int j = 0; j < 4; ++j) {
      N[i * 4 + j] = std::make_unique<MPoly>(ctx);
      if (!site) {
        fmpz_mpoly_set(N[i * 4 + j]->get(), T[i * 4 + j]->get(), c);
        continue;
      }
      const int blk = i / 2, r = i % 2;  // blockdiag(g, g) * T
      for (int l = 0; l < 2; ++l) {
        fmpz_mpoly_scalar_mul_si(tmp.get(), T[(2 * blk + l) * 4 + j]->get(), static_cast<slong>((*site)(r, l)), c);
        fmpz_mpoly_add(N[i * 4 + j]->get(), N[i * 4 + j]->get(), tmp.get(), c);
      }
    }
  // A = z lambda I - N(z); F~ = det A = z^4 det(lambda - M(z)).
  std::vector<std::unique_ptr<MPoly>> A(16);
  MPoly zl(ctx);
  {
    Int one;
    fmpz_one(one.get());
    ulong exp[2] = {1, 1};
    fmpz_mpoly_set_coeff_fmpz_ui(zl.get(), one.get(), exp, c);
  }
  for (int i = 0; i < 16; ++i) {
    A[i] = std::make_unique<MPoly>(ctx);
    fmpz_mpoly_neg(A[i]->get(), N[i]->get(), c);
    if (i % 5 == 0) fmpz_mpoly_add(A[i]->get(), A[i]->get(), zl.get(), c);
  }
  F = std::make_unique<MPoly>(ctx);
  int perm[4] = {0, 1, 2, 3};
  MPoly term(ctx);
  do {
    int inv = 0;
    for (int i = 0; i < 4; ++i)
      for (int j = i + 1; j < 4; ++j) inv += perm[i] > perm[j];
    fmpz_mpoly_set(term.get(), A[0 * 4 + perm[0]]->get(), c);
    for (int i = 1; i < 4; ++i) fmpz_mpoly_mul(term.get(), term.get(), A[i * 4 + perm[i]]->get(), c);
    if (inv % 2) fmpz_mpoly_neg(term.get(), term.get(), c);
    fmpz_mpoly_add(F->get(), F->get(), term.get(), c);
  } while (std::next_permutation(perm, perm + 4));
  // Divide out the largest power of z.
  slong zmin = -1;
  for (slong i = 0; i < fmpz_mpoly_length(F->get(), c); ++i) {
    const slong ez = fmpz_mpoly_get_term_var_exp_si(F->get(), i, kZ, c);
    zmin = zmin < 0 ? ez : std::min(zmin, ez);
  }
  if (zmin > 0) {
    MPoly zs(ctx), q(ctx);
    Int one;
    fmpz_one(one.get());
    ulong exp[2] = {0, static_cast<ulong>(zmin)};
    fmpz_mpoly_set_coeff_fmpz_ui(zs.get(), one.get(), exp, c);
    if (!fmpz_mpoly_divides(q.get(), F->get(), zs.get(), c))
      throw std::logic_error("BlochExact: z power does not divide");
    fmpz_mpoly_swap(F->get(), q.get(), c);
  }
  if (fmpz_mpoly_degree_si(F->get(), kLambda, c) != 4)
    throw std::logic_error("BlochExact: characteristic polynomial of degree != 4");

  // Squarefree factorisation; the radical's discriminant locates the kinks.
  flint::MPolyFactors fac(ctx);
  if (!fmpz_mpoly_factor_squarefree(fac.get(), F->get(), c))
    throw SolverError("BlochExact: squarefree factorisation failed");
  MPoly radical(ctx);
  fmpz_mpoly_one(radical.get(), c);
  for (slong i = 0; i < fac.get()->num; ++i) {
    const fmpz_mpoly_struct* fi = fac.get()->poly + i;
    if (fmpz_mpoly_degree_si(fi, kLambda, c) < 1) continue;  // a power of z
    LambdaPoly lp = split_by_lambda(fi, c);
    lp.mult = fmpz_get_si(fac.get()->exp + i);
    factors.push_back(std::move(lp));
    fmpz_mpoly_mul(radical.get(), radical.get(), fi, c);
  }
  MPoly disc(ctx);
  if (fmpz_mpoly_degree_si(radical.get(), kLambda, c) >= 2) {
    if (!fmpz_mpoly_discriminant(disc.get(), radical.get(), kLambda, c))
      throw SolverError("BlochExact: discriminant failed");
  } else {
    fmpz_mpoly_one(disc.get(), c);  // one simple root: no collisions
  }
  if (fmpz_mpoly_is_zero(disc.get(), c)) throw SolverError("BlochExact: vanishing discriminant");
  Poly D;
  if (!fmpz_mpoly_get_fmpz_poly(D.get(), disc.get(), kZ, c))
    throw std::logic_error("BlochExact: discriminant depends on lambda");
  slong z0 = 0;
  while (fmpz_is_zero(D.get()->coeffs + z0)) ++z0;
  fmpz_poly_shift_right(D.get(), D.get(), z0);
  find_kinks(D.get());
}

void BlochExact::Impl::find_kinks(const fmpz_poly_struct* D) {
  // Root-of-unity kinks: the cyclotomic factors of D.
  if (fmpz_poly_degree(D) >= 1) {
    flint::PolyFactors fac;
    fmpz_poly_factor(fac.get(), D);
    for (slong i = 0; i < fac.get()->num; ++i) {
      const ulong d = fmpz_poly_is_cyclotomic(fac.get()->p + i);
      if (d > 0) orders.push_back(static_cast<std::int64_t>(d));
    }
    std::sort(orders.begin(), orders.end());
  }
  // All kinks in (0, pi): real roots y in (-2, 2) of the trace polynomial of
  // gcd(D, rev D) after removing z = +-1.
  std::vector<std::pair<double, double>> ys;  // (y, radius)
  if (fmpz_poly_degree(D) >= 2) {
    Poly T;
    CircleCensus census;
    circle_trace_polynomial(T.get(), D, census);
    if (fmpz_poly_degree(T.get()) >= 1) {
      flint::PolyFactors sq;
      fmpz_poly_factor_squarefree(sq.get(), T.get());
      for (slong i = 0; i < sq.get()->num; ++i) {
        const fmpz_poly_struct* f = sq.get()->p + i;
        const slong d = fmpz_poly_degree(f);
        const std::int64_t expect = roots_between_minus2_and_2(f);  // Sturm
        for (slong prec = kStartPrec;; prec *= 2) {
          if (prec > kMaxPrec) throw SolverError("BlochExact: kinks not isolated within the precision limit");
          CVec roots(d);
          arb_fmpz_poly_complex_roots(roots.get(), f, 0, prec);
          std::vector<std::pair<double, double>> found;
          bool undecided = false;
          Ball a, two;
          arb_set_ui(two.get(), 2);
          for (slong j = 0; j < d; ++j) {
            if (!arb_is_zero(acb_imagref(roots[j]))) continue;  // non-real root
            arb_abs(a.get(), acb_realref(roots[j]));
            if (arb_lt(a.get(), two.get())) {
              const double mid = arf_get_d(arb_midref(acb_realref(roots[j])), ARF_RND_NEAR);
              const double rad = mag_get_d(arb_radref(acb_realref(roots[j])));
              found.emplace_back(mid, rad + 4e-16 * std::abs(mid));
            } else if (!arb_gt(a.get(), two.get())) {
              undecided = true;
            }
          }
          if (undecided) continue;
          if (static_cast<std::int64_t>(found.size()) != expect)
            throw std::logic_error("BlochExact: arb and Sturm disagree on the kinks");
          ys.insert(ys.end(), found.begin(), found.end());
          break;
        }
      }
    }
  }
  std::sort(ys.begin(), ys.end(), [](const auto& a, const auto& b) { return a.first > b.first; });
  std::vector<double> bounds{2.0};
  std::vector<double> brad{0.0};
  for (const auto& [y, r] : ys) {
    kink_traces.push_back(y);
    kink_trace_rad.push_back(r);
    kinks.push_back(std::acos(std::clamp(y / 2.0, -1.0, 1.0)));
    bounds.push_back(y);
    brad.push_back(r);
  }
  bounds.push_back(-2.0);
  brad.push_back(0.0);
  // Arcs between consecutive trace values (y descending = k ascending).
  for (std::size_t i = 0; i + 1 < bounds.size(); ++i) {
    BlochArc arc;
    arc.k_lo = i == 0 ? 0.0 : kinks[i - 1];
    arc.k_hi = i + 1 == bounds.size() - 1 ? kPi : kinks[i];
    const double lo = bounds[i + 1] + brad[i + 1], hi = bounds[i] - brad[i];
    if (!(lo < hi)) throw SolverError("BlochExact: two kinks too close to separate");
    arc.on_circle = count_at_trace(0.5 * (lo + hi));
    arcs.push_back(arc);
  }
}

int BlochExact::Impl::count_at_trace(double y) const {
  for (slong prec = kStartPrec; prec <= kMaxPrec; prec *= 2) {
    CBall z;
    z_from_trace(z.get(), y, prec);
    std::vector<RootBall> roots;
    if (!factor_roots(roots, factors, z.get(), prec)) continue;
    std::vector<int> where;
    if (!classify(where, roots, prec)) continue;
    std::int64_t on = 0;
    for (std::size_t i = 0; i < roots.size(); ++i)
      if (where[i] == 0) on += roots[i].mult;
    return static_cast<int>(on);
  }
  throw SolverError("BlochExact: eigenvalues at an arc point not isolated within the precision limit");
}

std::int64_t BlochExact::Impl::orbit_total(std::int64_t d) const {
  const auto it = orbit_zeros.find(d);
  if (it != orbit_zeros.end()) return it->second;
  Poly r;
  orbit_polynomial(r.get(), d);
  const CircleCensus cc = circle_census(r.get());
  orbit_zeros[d] = cc.on_circle;
  return cc.on_circle;
}

void BlochExact::Impl::orbit_polynomial(fmpz_poly_struct* r, std::int64_t d) const {
  auto* c = ctx.get();
  Poly phi;
  fmpz_poly_cyclotomic(phi.get(), static_cast<ulong>(d));
  MPoly Phi(ctx), R(ctx);
  fmpz_mpoly_set_fmpz_poly(Phi.get(), phi.get(), kZ, c);
  if (!fmpz_mpoly_resultant(R.get(), F->get(), Phi.get(), kZ, c))
    throw SolverError("BlochExact: resultant failed");
  if (!fmpz_mpoly_get_fmpz_poly(r, R.get(), kLambda, c))
    throw std::logic_error("BlochExact: resultant depends on z");
}

std::vector<std::pair<double, double>> BlochExact::orbit_exponents(std::int64_t d) const {
  Poly r;
  impl_->orbit_polynomial(r.get(), d);
  const CircleCensus cc = circle_census(r.get());
  std::vector<std::pair<double, double>> out;
  if (!certified_log_moduli(r.get(), cc, out)) return {};
  std::sort(out.begin(), out.end(), [](const auto& a, const auto& b) { return a.first > b.first; });
  return out;
}

BlochExact::BlochExact(const Mat4& G, const Mat2* site) : impl_(std::make_unique<Impl>()) { impl_->build(G, site); }
BlochExact::~BlochExact() = default;

const std::vector<BlochArc>& BlochExact::arcs() const { return impl_->arcs; }
const std::vector<double>& BlochExact::kinks() const { return impl_->kinks; }
const std::vector<std::int64_t>& BlochExact::kink_orders() const { return impl_->orders; }

int BlochExact::on_circle_near(double k) const {
  k = std::fmod(k, 2 * kPi);
  if (k < 0) k += 2 * kPi;
  if (k > kPi) k = 2 * kPi - k;
  const auto& a = impl_->arcs;
  for (const BlochArc& arc : a)
    if (k <= arc.k_hi) return arc.on_circle;
  return a.back().on_circle;
}

RingZeros BlochExact::ring_zeros(std::int64_t n) const {
  if (n < 1) throw InvalidInput("ring_zeros: needs at least one cell");
  RingZeros out;
  out.per_momentum.assign(static_cast<std::size_t>(n), 0);
  std::vector<std::int64_t> present;
  for (std::int64_t d : impl_->orders)
    if (n % d == 0) present.push_back(d);
  const auto& ys = impl_->kink_traces;
  const auto& yr = impl_->kink_trace_rad;
  for (std::int64_t m = 0; m < n; ++m) {
    const std::int64_t d = n / std::gcd(m, n);
    if (std::find(present.begin(), present.end(), d) != present.end()) {
      out.per_momentum[static_cast<std::size_t>(m)] = -1;
      continue;
    }
    // Arc of y_m = 2 cos(2 pi m / n): ys is descending; arc i lies between
    // ys[i-1] and ys[i]. y_m is never a kink (it would be a root of unity of
    // order d on a cyclotomic factor), so a wide enough margin decides.
    const double y = 2.0 * std::cos(2.0 * kPi * static_cast<double>(m) / static_cast<double>(n));
    std::size_t arc = 0;
    for (std::size_t i = 0; i < ys.size(); ++i) {
      const double margin = yr[i] + 1e-12;
      if (y > ys[i] + margin) break;
      if (y < ys[i] - margin) {
        arc = i + 1;
        continue;
      }
      // Too close for doubles: compare exactly-rounded enclosures.
      Ball yb, kb;
      for (slong prec = 128;; prec *= 2) {
        if (prec > kMaxPrec) throw SolverError("ring_zeros: a momentum too close to a kink to separate");
        fmpq_t q;
        fmpq_init(q);
        fmpq_set_si(q, 2 * m, static_cast<ulong>(n));
        arb_cos_pi_fmpq(yb.get(), q, prec);
        fmpq_clear(q);
        arb_mul_2exp_si(yb.get(), yb.get(), 1);
        arb_set_d(kb.get(), ys[i]);
        mag_set_d(arb_radref(kb.get()), yr[i]);
        if (arb_gt(yb.get(), kb.get())) break;
        if (arb_lt(yb.get(), kb.get())) {
          arc = i + 1;
          break;
        }
        throw SolverError("ring_zeros: kink enclosure too wide to place a momentum");
      }
      if (arc != i + 1) break;
    }
    out.per_momentum[static_cast<std::size_t>(m)] = impl_->arcs[arc].on_circle;
  }
  for (std::int64_t d : present) out.orbits.emplace_back(d, impl_->orbit_total(d));
  return out;
}

bool BlochExact::certified_exponents(std::int64_t m, std::int64_t n, double value[4], double radius[4]) const {
  return impl_->exponents_at(
      [&](acb_t z, slong prec) {
        CBall x;
        fmpq_t q;
        fmpq_init(q);
        fmpq_set_si(q, 2 * m, static_cast<ulong>(n));
        arb_set_fmpq(acb_realref(x.get()), q, prec);
        fmpq_clear(q);
        acb_exp_pi_i(z, x.get(), prec);
      },
      value, radius);
}

bool BlochExact::certified_exponents_at(double k, double value[4], double radius[4]) const {
  return impl_->exponents_at(
      [&](acb_t z, slong prec) {
        CBall x;
        arb_set_d(acb_imagref(x.get()), k);
        acb_exp(z, x.get(), prec);
      },
      value, radius);
}

template <class MakeZ>
bool BlochExact::Impl::exponents_at(MakeZ&& make_z, double value[4], double radius[4]) const {
  for (slong prec = kStartPrec; prec <= kMaxPrec; prec *= 2) {
    CBall z;
    make_z(z.get(), prec);
    std::vector<RootBall> roots;
    if (!factor_roots(roots, factors, z.get(), prec)) continue;
    std::vector<std::pair<double, double>> ex;
    Ball a;
    bool ok = true;
    for (const RootBall& r : roots) {
      acb_abs(a.get(), r.ball->get(), prec);
      arb_log(a.get(), a.get(), prec);
      if (!arb_is_finite(a.get())) {
        ok = false;
        break;
      }
      const double mid = arf_get_d(arb_midref(a.get()), ARF_RND_NEAR);
      const double rad = mag_get_d(arb_radref(a.get())) + 2.3e-16 * std::abs(mid);
      for (std::int64_t k = 0; k < r.mult; ++k) ex.emplace_back(mid, rad);
    }
    if (!ok || ex.size() != 4) continue;
    std::sort(ex.begin(), ex.end(), [](const auto& u, const auto& v) { return u.first > v.first; });
    if (ex[3].second > 1e-12 && prec < kMaxPrec) continue;
    for (int j = 0; j < 4; ++j) {
      value[j] = ex[static_cast<std::size_t>(j)].first;
      radius[j] = ex[static_cast<std::size_t>(j)].second;
    }
    return true;
  }
  return false;
}

}  // namespace toral
