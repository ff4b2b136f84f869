// Tests of the certified positive real roots kernel (kernels/real_roots).
// Each numeric check names its source beside it: closed-form roots (worked
// examples, textbook formulas) or arb's own complex root finder
// (arb_fmpz_poly_complex_roots, reference library: arb), which shares no code
// with the kernel's exact-sign and Descartes routes.
#include <gtest/gtest.h>

#include <acb.h>
#include <arb.h>
#include <arb_fmpz_poly.h>
#include <flint/fmpz.h>
#include <flint/fmpz_poly.h>
#include <flint/fmpz_poly_factor.h>

#include <cstdint>
#include <cstdlib>
#include <random>
#include <stdexcept>
#include <vector>

#include "flint_raii.hpp"
#include "real_roots.hpp"

using namespace toral;

namespace {

using flint::Ball;
using flint::CVec;
using flint::Poly;

// prod (x - r) over integer roots r (with repetition), exactly.
void from_integer_roots(fmpz_poly_struct* p, const std::vector<std::int64_t>& roots) {
  fmpz_poly_one(p);
  Poly lin;
  for (std::int64_t r : roots) {
    fmpz_poly_zero(lin.get());
    fmpz_poly_set_coeff_si(lin.get(), 1, 1);
    fmpz_poly_set_coeff_si(lin.get(), 0, -r);
    fmpz_poly_mul(p, p, lin.get());
  }
}

// Every ball: disjoint from the next, relative accuracy >= bits.
void expect_isolating(const PositiveRoots& r, std::int64_t bits) {
  ASSERT_EQ(r.balls.size(), r.multiplicity.size());
  ASSERT_EQ(r.mid.size(), r.multiplicity.size());
  for (std::size_t i = 0; i < r.balls.size(); ++i) {
    const arb_struct* b = r.balls[i]->get();
    EXPECT_TRUE(arb_is_positive(b)) << i;
    EXPECT_GE(arb_rel_accuracy_bits(b), bits) << i;
    EXPECT_GE(r.multiplicity[i], 1);
    if (i > 0) {
      EXPECT_FALSE(arb_overlaps(r.balls[i - 1]->get(), b)) << i;
      EXPECT_LT(arf_cmp(arb_midref(r.balls[i - 1]->get()), arb_midref(b)), 0) << "ascending " << i;
    }
    // The double view encloses the ball's midpoint.
    EXPECT_GE(r.radius[i], 0.0);
  }
}

// The positive roots of p from arb_fmpz_poly_complex_roots on each squarefree
// factor (reference library: arb), each with its multiplicity, unsorted.
struct RefRoot {
  std::unique_ptr<Ball> ball;
  std::int64_t mult;
};
std::vector<RefRoot> reference_positive_roots(const fmpz_poly_struct* p, slong prec) {
  std::vector<RefRoot> out;
  Poly g;
  slong m = 0;
  while (fmpz_is_zero(fmpz_poly_get_coeff_ptr(p, m))) ++m;
  fmpz_poly_shift_right(g.get(), p, m);
  if (fmpz_poly_degree(g.get()) <= 0) return out;
  flint::PolyFactors fac;
  fmpz_poly_factor_squarefree(fac.get(), g.get());
  for (slong i = 0; i < fac.get()->num; ++i) {
    const slong d = fmpz_poly_degree(fac.get()->p + i);
    if (d <= 0) continue;
    CVec z(d);
    arb_fmpz_poly_complex_roots(z.get(), fac.get()->p + i, 0, prec);
    for (slong j = 0; j < d; ++j)
      if (arb_is_zero(acb_imagref(z[j])) && arb_is_positive(acb_realref(z[j]))) {
        out.push_back({std::make_unique<Ball>(), fac.get()->exp[i]});
        arb_set(out.back().ball->get(), acb_realref(z[j]));
      }
  }
  return out;
}

// The kernel's roots against the reference: the same number, and each
// reference root lies in exactly one of the kernel's balls, of its multiplicity.
void expect_matches_reference(const fmpz_poly_struct* p, const PositiveRoots& r) {
  const std::vector<RefRoot> ref = reference_positive_roots(p, 128);
  ASSERT_EQ(static_cast<std::int64_t>(ref.size()), r.size());
  for (const RefRoot& x : ref) {
    int hits = 0;
    for (std::size_t i = 0; i < r.balls.size(); ++i)
      if (arb_overlaps(x.ball->get(), r.balls[i]->get())) {
        ++hits;
        EXPECT_EQ(r.multiplicity[i], x.mult);
      }
    EXPECT_EQ(hits, 1);
  }
}

// Chebyshev T_n by T_0 = 1, T_1 = x, T_{n+1} = 2x T_n - T_{n-1}
// (Abramowitz & Stegun 22.7.4).
void chebyshev_t(fmpz_poly_struct* t, int n) {
  Poly a, b, c;
  fmpz_poly_one(a.get());
  fmpz_poly_set_coeff_si(b.get(), 1, 1);
  if (n == 0) {
    fmpz_poly_set(t, a.get());
    return;
  }
  for (int k = 1; k < n; ++k) {
    fmpz_poly_shift_left(c.get(), b.get(), 1);
    fmpz_poly_scalar_mul_si(c.get(), c.get(), 2);
    fmpz_poly_sub(c.get(), c.get(), a.get());
    fmpz_poly_swap(a.get(), b.get());
    fmpz_poly_swap(b.get(), c.get());
  }
  fmpz_poly_set(t, b.get());
}

}  // namespace

TEST(RealRoots, ProductOfLinearFactors) {
  // (x - 1)(x - 2)(x - 3) = x^3 - 6x^2 + 11x - 6 (worked example: expand by hand).
  for (bool fast : {true, false}) {
    RootOptions opt;
    opt.fast = fast;
    const PositiveRoots r = positive_roots({-6, 11, -6, 1}, 64, opt);
    EXPECT_EQ(r.degree, 3);
    EXPECT_EQ(r.at_zero, 0);
    ASSERT_EQ(r.size(), 3);
    expect_isolating(r, 64);
    for (int i = 0; i < 3; ++i) {
      EXPECT_TRUE(arb_contains_si(r.balls[static_cast<std::size_t>(i)]->get(), i + 1)) << i;
      EXPECT_EQ(r.multiplicity[static_cast<std::size_t>(i)], 1);
      EXPECT_NEAR(r.mid[static_cast<std::size_t>(i)], i + 1, r.radius[static_cast<std::size_t>(i)]);
    }
  }
  // (2x - 1)(3x - 1)(x + 4): (2x - 1)(3x - 1) = 6x^2 - 5x + 1, times (x + 4)
  // gives 6x^3 + 19x^2 - 19x + 4 (worked example). Positive roots 1/3 and
  // 1/2; -4 is not reported.
  const PositiveRoots r = positive_roots({4, -19, 19, 6}, 100);
  ASSERT_EQ(r.size(), 2);
  expect_isolating(r, 100);
  Ball third, half;
  arb_set_si(third.get(), 1);
  arb_div_si(third.get(), third.get(), 3, 200);
  arb_set_d(half.get(), 0.5);
  EXPECT_TRUE(arb_overlaps(r.balls[0]->get(), third.get()));
  EXPECT_TRUE(arb_contains(r.balls[1]->get(), half.get()));
}

TEST(RealRoots, ChebyshevRootsInClosedForm) {
  // The roots of T_n are cos((2m - 1) pi / (2n)), m = 1..n (Abramowitz &
  // Stegun 22.16.4); the positive ones are m <= n/2, and 0 is a root for odd n.
  for (int n : {1, 2, 5, 8, 13, 20}) {
    Poly t;
    chebyshev_t(t.get(), n);
    for (std::int64_t bits : {53, 200}) {
      for (bool fast : {true, false}) {
        RootOptions opt;
        opt.fast = fast;
        const PositiveRoots r = positive_roots(t.get(), bits, opt);
        EXPECT_EQ(r.at_zero, n % 2) << n;
        ASSERT_EQ(r.size(), n / 2) << n;
        expect_isolating(r, bits);
        Ball x;
        for (int m = 1; m <= n / 2; ++m) {
          // Ascending order: the largest cosine (m = 1) comes last.
          arb_set_si(x.get(), 2 * m - 1);
          arb_div_si(x.get(), x.get(), 2 * n, 2 * bits + 64);
          arb_cos_pi(x.get(), x.get(), 2 * bits + 64);
          const arb_struct* b = r.balls[static_cast<std::size_t>(n / 2 - m)]->get();
          EXPECT_TRUE(arb_overlaps(b, x.get())) << "n = " << n << " m = " << m;
        }
        expect_matches_reference(t.get(), r);
      }
    }
  }
}

TEST(RealRoots, RepeatedRoots) {
  // (x - 2)^3 (x - 5)^2 (x + 1) (worked example): roots 2 and 5 with
  // multiplicities 3 and 2; -1 is not reported.
  Poly p;
  from_integer_roots(p.get(), {2, 2, 2, 5, 5, -1});
  for (bool fast : {true, false}) {
    RootOptions opt;
    opt.fast = fast;
    const PositiveRoots r = positive_roots(p.get(), 80, opt);
    ASSERT_EQ(r.size(), 2);
    expect_isolating(r, 80);
    EXPECT_TRUE(arb_contains_si(r.balls[0]->get(), 2));
    EXPECT_TRUE(arb_contains_si(r.balls[1]->get(), 5));
    EXPECT_EQ(r.multiplicity[0], 3);
    EXPECT_EQ(r.multiplicity[1], 2);
    EXPECT_EQ(r.count_with_multiplicity(), 5);
    expect_matches_reference(p.get(), r);
  }
  EXPECT_EQ(positive_root_count(p.get()), 2);
  // (x^2 - 2)^2 (x - 1): sqrt 2 double, 1 simple (worked example).
  const PositiveRoots r = positive_roots({-4, 4, 4, -4, -1, 1}, 64);
  ASSERT_EQ(r.size(), 2);
  Ball s2;
  arb_sqrt_ui(s2.get(), 2, 128);
  EXPECT_TRUE(arb_contains_si(r.balls[0]->get(), 1));
  EXPECT_TRUE(arb_overlaps(r.balls[1]->get(), s2.get()));
  EXPECT_EQ(r.multiplicity[0], 1);
  EXPECT_EQ(r.multiplicity[1], 2);
}

TEST(RealRoots, RootsVeryCloseTogether) {
  // (x - 1)(2^k x - (2^k + 1)): roots 1 and 1 + 2^-k (worked example), closer
  // than double precision tells apart for k > 52: the sign-proof route fails
  // and Descartes' bisection separates them.
  for (slong k : {40, 60, 200, 1000}) {
    Poly p, a, b;
    fmpz_poly_set_coeff_si(a.get(), 1, 1);
    fmpz_poly_set_coeff_si(a.get(), 0, -1);
    flint::Int c;
    fmpz_one(c.get());
    fmpz_mul_2exp(c.get(), c.get(), static_cast<ulong>(k));
    fmpz_poly_set_coeff_fmpz(b.get(), 1, c.get());
    fmpz_add_ui(c.get(), c.get(), 1);
    fmpz_neg(c.get(), c.get());
    fmpz_poly_set_coeff_fmpz(b.get(), 0, c.get());
    fmpz_poly_mul(p.get(), a.get(), b.get());
    const PositiveRoots r = positive_roots(p.get(), 30);
    ASSERT_EQ(r.size(), 2) << k;
    expect_isolating(r, 30);
    Ball x;
    arb_one(x.get());
    EXPECT_TRUE(arb_contains(r.balls[0]->get(), x.get())) << k;
    arb_mul_2exp_si(x.get(), x.get(), -k);
    arb_add_ui(x.get(), x.get(), 1, ARF_PREC_EXACT);
    EXPECT_TRUE(arb_contains(r.balls[1]->get(), x.get())) << k;
    EXPECT_EQ(positive_root_count(p.get()), 2);
  }
  // Two irrational roots about 2^-59.5 apart: (x^2 - 2)(2^58 x^2 - 2^59 - 1)
  // has the roots sqrt 2 and sqrt(2 + 2^-58) (worked example), checked
  // against arb.
  Poly p, a, b;
  fmpz_poly_set_coeff_si(a.get(), 2, 1);
  fmpz_poly_set_coeff_si(a.get(), 0, -2);
  fmpz_poly_set_coeff_si(b.get(), 2, std::int64_t{1} << 58);
  fmpz_poly_set_coeff_si(b.get(), 0, -((std::int64_t{1} << 59) + 1));
  fmpz_poly_mul(p.get(), a.get(), b.get());
  const PositiveRoots r = positive_roots(p.get(), 64);
  ASSERT_EQ(r.size(), 2);
  expect_isolating(r, 64);
  expect_matches_reference(p.get(), r);
}

TEST(RealRoots, NoPositiveRoots) {
  // x^2 + 1, (x + 1)(x + 2) = x^2 + 3x + 2, x^4 + x^2 + 1, x^2 - x + 1 (all
  // roots non-real or negative: worked examples), and a constant.
  for (const std::vector<std::int64_t>& c : std::vector<std::vector<std::int64_t>>{
           {1, 0, 1}, {2, 3, 1}, {1, 0, 1, 0, 1}, {1, -1, 1}, {7}, {-3}}) {
    const PositiveRoots r = positive_roots(c, 64);
    EXPECT_EQ(r.size(), 0);
    EXPECT_EQ(r.at_zero, 0);
    EXPECT_EQ(r.degree, static_cast<std::int64_t>(c.size()) - 1);
    Poly p;
    for (std::size_t i = 0; i < c.size(); ++i) fmpz_poly_set_coeff_si(p.get(), static_cast<slong>(i), c[i]);
    EXPECT_EQ(positive_root_count(p.get()), 0);
  }
}

TEST(RealRoots, RootAtZero) {
  // x^3 (x - 3) = x^4 - 3x^3: 0 three times (not positive), 3 once (worked example).
  const PositiveRoots r = positive_roots({0, 0, 0, -3, 1}, 64);
  EXPECT_EQ(r.degree, 4);
  EXPECT_EQ(r.at_zero, 3);
  ASSERT_EQ(r.size(), 1);
  EXPECT_TRUE(arb_contains_si(r.balls[0]->get(), 3));
  // x alone, and x^2 (x + 1): only the root 0.
  for (const std::vector<std::int64_t>& c : std::vector<std::vector<std::int64_t>>{{0, 1}, {0, 0, 1, 1}}) {
    const PositiveRoots z = positive_roots(c, 64);
    EXPECT_EQ(z.size(), 0);
    EXPECT_EQ(z.at_zero, static_cast<std::int64_t>(c.size()) == 2 ? 1 : 2);
  }
}

TEST(RealRoots, LargeCoefficients) {
  // Wilkinson's polynomial prod_{k=1..20} (x - k) (Wilkinson 1959; its
  // coefficients exceed int64) and the same with the roots scaled by 10^15.
  Poly w;
  std::vector<std::int64_t> ks;
  for (std::int64_t k = 1; k <= 20; ++k) ks.push_back(k);
  from_integer_roots(w.get(), ks);
  EXPECT_GT(std::abs(fmpz_poly_max_bits(w.get())), 63);  // the x^2 coefficient is about 1.4e19
  for (bool fast : {true, false}) {
    RootOptions opt;
    opt.fast = fast;
    const PositiveRoots r = positive_roots(w.get(), 100, opt);
    ASSERT_EQ(r.size(), 20);
    expect_isolating(r, 100);
    for (std::int64_t k = 1; k <= 20; ++k)
      EXPECT_TRUE(arb_contains_si(r.balls[static_cast<std::size_t>(k - 1)]->get(), k)) << k;
    expect_matches_reference(w.get(), r);
  }
  // (10^30 x - 1)(x - 10^30) (worked example): roots 10^-30 and 10^30, 200
  // binary orders apart, coefficients of 100 bits.
  Poly p, a, b;
  flint::Int t;
  fmpz_set_ui(t.get(), 10);
  fmpz_pow_ui(t.get(), t.get(), 30);
  fmpz_poly_set_coeff_fmpz(a.get(), 1, t.get());
  fmpz_poly_set_coeff_si(a.get(), 0, -1);
  fmpz_poly_set_coeff_si(b.get(), 1, 1);
  fmpz_neg(t.get(), t.get());
  fmpz_poly_set_coeff_fmpz(b.get(), 0, t.get());
  fmpz_poly_mul(p.get(), a.get(), b.get());
  for (bool fast : {true, false}) {
    RootOptions opt;
    opt.fast = fast;
    const PositiveRoots r = positive_roots(p.get(), 64, opt);
    ASSERT_EQ(r.size(), 2);
    expect_isolating(r, 64);
    Ball x;
    arb_set_fmpz(x.get(), t.get());
    arb_neg(x.get(), x.get());
    EXPECT_TRUE(arb_contains(r.balls[1]->get(), x.get()));
    arb_inv(x.get(), x.get(), 256);
    EXPECT_TRUE(arb_overlaps(r.balls[0]->get(), x.get()));
    EXPECT_NEAR(r.mid[0] / 1e-30, 1.0, 1e-15);
  }
}

TEST(RealRoots, RandomPolynomialsAgainstArb) {
  // Random integer polynomials with roots of every kind, and with a squared
  // factor, against arb_fmpz_poly_complex_roots (reference library: arb);
  // both routes of the kernel agree on the count.
  std::mt19937_64 rng(20261205);
  auto draw = [&](std::int64_t lo, std::int64_t hi) {
    return lo + static_cast<std::int64_t>(rng() % static_cast<std::uint64_t>(hi - lo + 1));
  };
  for (int trial = 0; trial < 60; ++trial) {
    Poly p, q;
    const slong d = static_cast<slong>(draw(1, 12));
    for (slong i = 0; i <= d; ++i) fmpz_poly_set_coeff_si(p.get(), i, draw(-50, 50));
    if (fmpz_poly_is_zero(p.get())) continue;
    if (trial % 3 == 0) {  // a repeated factor
      fmpz_poly_set_coeff_si(q.get(), 1, draw(1, 9));
      fmpz_poly_set_coeff_si(q.get(), 0, -draw(1, 30));
      fmpz_poly_mul(p.get(), p.get(), q.get());
      fmpz_poly_mul(p.get(), p.get(), q.get());
    }
    for (bool fast : {true, false}) {
      RootOptions opt;
      opt.fast = fast;
      const PositiveRoots r = positive_roots(p.get(), 64, opt);
      expect_isolating(r, 64);
      expect_matches_reference(p.get(), r);
      EXPECT_EQ(positive_root_count(p.get()), r.size());
    }
  }
}

TEST(RealRoots, InvalidInput) {
  // The zero polynomial, no coefficients, and accuracies outside [1, 2^20]
  // (documented in real_roots.hpp).
  EXPECT_THROW(positive_roots(std::vector<std::int64_t>{}, 64), RealRootsError);
  EXPECT_THROW(positive_roots(std::vector<std::int64_t>{0, 0, 0}, 64), RealRootsError);
  EXPECT_THROW(positive_roots({-1, 1}, 0), RealRootsError);
  EXPECT_THROW(positive_roots({-1, 1}, -5), RealRootsError);
  EXPECT_THROW(positive_roots({-1, 1}, kMaxRootBits + 1), RealRootsError);
  EXPECT_NO_THROW(positive_roots({-1, 1}, 1));
  Poly zero;
  EXPECT_THROW(positive_root_count(zero.get()), RealRootsError);
  EXPECT_THROW(positive_roots(zero.get(), 64), RealRootsError);
  // It is a std::invalid_argument, like the other kernels' bad input.
  EXPECT_THROW(positive_roots(zero.get(), 64), std::invalid_argument);
}

TEST(RealRoots, AllPositiveRoutes) {
  // The two routes for polynomials with only simple positive roots (the ones
  // gaussian_exact uses), against arb_fmpz_poly_complex_roots (reference
  // library: arb): roots 2^(13 j) for j = 0..9 (130 binary orders, worked
  // example) and prod (x - k^3), k = 1..12.
  std::vector<std::int64_t> cubes;
  for (std::int64_t k = 1; k <= 12; ++k) cubes.push_back(k * k * k);
  Poly wide, cub;
  from_integer_roots(cub.get(), cubes);
  fmpz_poly_one(wide.get());
  for (int j = 0; j < 10; ++j) {
    Poly lin;
    flint::Int c;
    fmpz_one(c.get());
    fmpz_mul_2exp(c.get(), c.get(), static_cast<ulong>(13 * j));
    fmpz_neg(c.get(), c.get());
    fmpz_poly_set_coeff_si(lin.get(), 1, 1);
    fmpz_poly_set_coeff_fmpz(lin.get(), 0, c.get());
    fmpz_poly_mul(wide.get(), wide.get(), lin.get());
  }
  for (const fmpz_poly_struct* f : {static_cast<const fmpz_poly_struct*>(wide.get()),
                                    static_cast<const fmpz_poly_struct*>(cub.get())}) {
    const slong d = fmpz_poly_degree(f);
    for (slong bits : {64, 300}) {
      CVec ref(d), s(d), v(d);
      arb_fmpz_poly_complex_roots(ref.get(), f, 0, bits);
      ASSERT_TRUE(separated_positive_roots(s.get(), f, bits));
      ASSERT_TRUE(validated_positive_roots(v.get(), f, bits, 5));
      for (slong i = 0; i < d; ++i) {
        // arb writes the real roots first in ascending order; so does the sign route.
        EXPECT_TRUE(arb_is_zero(acb_imagref(s[i])));
        EXPECT_TRUE(arb_is_zero(acb_imagref(v[i])));
        EXPECT_GE(arb_rel_accuracy_bits(acb_realref(s[i])), bits);
        EXPECT_GE(arb_rel_accuracy_bits(acb_realref(v[i])), bits);
        EXPECT_TRUE(arb_overlaps(acb_realref(s[i]), acb_realref(ref[i]))) << i;
        int hits = 0;
        for (slong j = 0; j < d; ++j) hits += arb_overlaps(acb_realref(v[j]), acb_realref(ref[i])) ? 1 : 0;
        EXPECT_EQ(hits, 1) << i;
      }
    }
  }
  // Not of that kind: non-real roots (x^2 - x + 1), a negative root
  // ((x - 1)(x + 2) = x^2 + x - 2), a double root ((x - 1)^2 (x - 2) =
  // x^3 - 4x^2 + 5x - 2) (worked examples): false, not a wrong enclosure.
  for (const std::vector<std::int64_t>& c :
       std::vector<std::vector<std::int64_t>>{{1, -1, 1}, {-2, 1, 1}, {-2, 5, -4, 1}}) {
    Poly p;
    for (std::size_t i = 0; i < c.size(); ++i) fmpz_poly_set_coeff_si(p.get(), static_cast<slong>(i), c[i]);
    const slong d = fmpz_poly_degree(p.get());
    CVec s(d), v(d);
    EXPECT_FALSE(separated_positive_roots(s.get(), p.get(), 64));
    EXPECT_FALSE(validated_positive_roots(v.get(), p.get(), 64, 3));
  }
}
