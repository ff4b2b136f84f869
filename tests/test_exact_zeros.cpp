// Exact zero exponents: the unit-circle census of integer polynomials
// (kernels/unit_circle) and the Bloch arcs and kinks (kernels/bloch_exact).
// End-to-end checks against sympy and mpmath are in tests/cli/test_exact_zeros.py.
#include <gtest/gtest.h>

#include <cmath>
#include <numbers>
#include <vector>

#include "bloch.hpp"
#include "bloch_exact.hpp"
#include "flint_raii.hpp"
#include "model.hpp"
#include "spectrum.hpp"
#include "test_gates.hpp"
#include "unit_circle.hpp"

namespace toral {
namespace {

using testgates::m2;
constexpr double kPi = std::numbers::pi;

// Coefficients, lowest degree first.
std::int64_t on_circle(const std::vector<std::int64_t>& c) { return circle_census(c).on_circle; }

// Product of polynomials given lowest degree first.
std::vector<std::int64_t> mul(const std::vector<std::int64_t>& a, const std::vector<std::int64_t>& b) {
  std::vector<std::int64_t> r(a.size() + b.size() - 1, 0);
  for (std::size_t i = 0; i < a.size(); ++i)
    for (std::size_t j = 0; j < b.size(); ++j) r[i + j] += a[i] * b[j];
  return r;
}

TEST(CircleCensus, KnownPolynomials) {
  // Cyclotomic polynomials: every root is a root of unity (Kronecker).
  for (ulong n = 1; n <= 30; ++n) {
    flint::Poly p;
    fmpz_poly_cyclotomic(p.get(), n);
    const CircleCensus c = circle_census(p.get());
    EXPECT_EQ(c.on_circle, c.degree) << "Phi_" << n;
  }
  // (x - 1)^3 (x + 1)^2: multiplicities by hand.
  const auto p = mul(mul(mul({-1, 1}, {-1, 1}), {-1, 1}), mul({1, 1}, {1, 1}));
  const CircleCensus c = circle_census(p);
  EXPECT_EQ(c.at_one, 3);
  EXPECT_EQ(c.at_minus_one, 2);
  EXPECT_EQ(c.on_circle, 5);
  // Lehmer's polynomial x^10 + x^9 - x^7 - x^6 - x^5 - x^4 - x^3 + x + 1: a
  // Salem polynomial with one root outside, one inside and 8 on the circle
  // (Lehmer, Ann. of Math. 34 (1933) 461), none a root of unity.
  EXPECT_EQ(on_circle({1, 1, 0, -1, -1, -1, -1, -1, 0, 1, 1}), 8);
  // The Salem polynomial x^4 - x^3 - x^2 - x + 1 (Salem number 1.7221; two
  // conjugates on the circle, from memory; numpy.roots agrees).
  EXPECT_EQ(on_circle({1, -1, -1, -1, 1}), 2);
  // Squared, and times Phi_6 = x^2 - x + 1: multiplicities add.
  EXPECT_EQ(on_circle(mul({1, -1, -1, -1, 1}, {1, -1, -1, -1, 1})), 4);
  EXPECT_EQ(on_circle(mul({1, -1, -1, -1, 1}, {1, -1, 1})), 4);
  // Arnold's cat x^2 - 3x + 1: hyperbolic, none; x^3 - x - 1 (plastic number
  // 1.3247 and a pair of modulus 0.8688): none; 2x^2 + 1 (roots +-i/sqrt 2):
  // none; 2x^2 - 2x + 2 = 2 Phi_6: two (by hand).
  EXPECT_EQ(on_circle({1, -3, 1}), 0);
  EXPECT_EQ(on_circle({-1, -1, 0, 1}), 0);
  EXPECT_EQ(on_circle({1, 0, 2}), 0);
  EXPECT_EQ(on_circle({2, -2, 2}), 2);
  // x^2 (x^2 + 1): two roots at 0, two on the circle.
  const CircleCensus z = circle_census({0, 0, 1, 0, 1});
  EXPECT_EQ(z.at_zero, 2);
  EXPECT_EQ(z.on_circle, 2);
  EXPECT_THROW(circle_census(std::vector<std::int64_t>{0}), std::invalid_argument);
}

TEST(CircleCensus, CharpolyIntoAUsedPolynomial) {
  // integer_charpoly writes det(x I - A) whatever `out` held before (it zeroes
  // it first: the FLINT 2.9 fmpz_mat_charpoly note of issue 10; a guard, the
  // misbehaviour itself was not reproduced with 2.9.0-5). A = [[2, 1],
  // [1, 1]]: x^2 - 3x + 1 (by hand); 5x5 upper triangular with diagonal
  // 1..5: prod (x - k) (by hand).
  SparseInt A;
  A.n = 2;
  A.rowptr = {0, 2, 4};
  A.col = {0, 1, 0, 1};
  A.val = {2, 1, 1, 1};
  flint::Poly out, want;
  for (slong i = 0; i < 9; ++i) fmpz_poly_set_coeff_si(out.get(), i, 1000 + i);  // longer than the result
  integer_charpoly(out.get(), A);
  fmpz_poly_set_coeff_si(want.get(), 0, 1);
  fmpz_poly_set_coeff_si(want.get(), 1, -3);
  fmpz_poly_set_coeff_si(want.get(), 2, 1);
  EXPECT_TRUE(fmpz_poly_equal(out.get(), want.get()));
  // Again into the same (now used) polynomial, with a larger matrix.
  SparseInt U;
  U.n = 5;
  U.rowptr = {0};
  for (std::int64_t i = 0; i < 5; ++i) {
    for (std::int64_t j = i; j < 5; ++j) {
      U.col.push_back(j);
      U.val.push_back(i == j ? i + 1 : 7);
    }
    U.rowptr.push_back(static_cast<std::int64_t>(U.col.size()));
  }
  integer_charpoly(out.get(), U);
  fmpz_poly_one(want.get());
  flint::Poly lin;
  for (slong k = 1; k <= 5; ++k) {
    fmpz_poly_zero(lin.get());
    fmpz_poly_set_coeff_si(lin.get(), 1, 1);
    fmpz_poly_set_coeff_si(lin.get(), 0, -k);
    fmpz_poly_mul(want.get(), want.get(), lin.get());
  }
  EXPECT_TRUE(fmpz_poly_equal(out.get(), want.get()));
  // And the small one again into the degree-5 result: no stale high terms.
  integer_charpoly(out.get(), A);
  EXPECT_EQ(fmpz_poly_degree(out.get()), 2);
}

TEST(CircleCensus, TracePolynomial) {
  // x^4 + 3x^3 + 5x^2 + 3x + 1 = x^2 T(x + 1/x) with T = y^2 + 3y + 3 (by hand).
  flint::Poly h, T;
  const std::int64_t c[] = {1, 3, 5, 3, 1};
  for (int i = 0; i < 5; ++i) fmpz_poly_set_coeff_si(h.get(), i, c[i]);
  trace_polynomial(T.get(), h.get());
  ASSERT_EQ(fmpz_poly_degree(T.get()), 2);
  EXPECT_EQ(fmpz_poly_get_coeff_si(T.get(), 0), 3);
  EXPECT_EQ(fmpz_poly_get_coeff_si(T.get(), 1), 3);
  EXPECT_EQ(fmpz_poly_get_coeff_si(T.get(), 2), 1);
  fmpz_poly_set_coeff_si(h.get(), 0, 2);  // no longer palindromic
  EXPECT_THROW(trace_polynomial(T.get(), h.get()), std::invalid_argument);
  // Roots of y^2 - 2 (+-1.414) and y^2 - 5 (+-2.236) in (-2, 2): 2 and 0.
  flint::Poly f;
  fmpz_poly_set_coeff_si(f.get(), 0, -2);
  fmpz_poly_set_coeff_si(f.get(), 2, 1);
  EXPECT_EQ(roots_between_minus2_and_2(f.get()), 2);
  fmpz_poly_set_coeff_si(f.get(), 0, -5);
  EXPECT_EQ(roots_between_minus2_and_2(f.get()), 0);
}

Circuit chain(std::int64_t L, Boundary b, const Mat2& A, const Mat2* site = nullptr) {
  Circuit c;
  c.L = L;
  c.boundary = b;
  c.bonds.assign(static_cast<std::size_t>(c.bond_count()), BondGate::position(A));
  if (site) c.sites.assign(static_cast<std::size_t>(L), *site);
  return c;
}

TEST(ExactZeros, UnipotentOpenChainAndDense) {
  // An open chain of [[1,1],[0,1]] has a unipotent upper-triangular M: every
  // exponent is zero (docs/model.md; physics notes). dgeevx returns a Jordan
  // cluster; the exact census makes all 2L exactly zero.
  for (std::int64_t L : {5, 16, 40}) {
    const Circuit c = chain(L, Boundary::Open, m2(1, 1, 0, 1));
    EXPECT_EQ(exact_zero_exponents(c), 2 * L);
    const Spectrum s = dense_spectrum(c);
    EXPECT_EQ(s.zero_rule, ZeroRule::Exact);
    EXPECT_EQ(s.zero_count, 2 * L);
    for (double x : s.exponents) EXPECT_EQ(x, 0.0);
    const ChaosSummary cs = summarize(s, L, SummaryOptions{});
    EXPECT_EQ(cs.unstable_count, 0);
    EXPECT_EQ(cs.ks_rate, 0.0);
    EXPECT_EQ(cs.lambda_max, 0.0);
  }
  // Beyond certify_max the tolerance rule is used and flagged.
  const Spectrum big = dense_spectrum(chain(40, Boundary::Open, m2(1, 1, 0, 1)), 8);
  EXPECT_EQ(big.zero_rule, ZeroRule::Numerical);
  // Arnold's cat on every site: no zero exponent.
  const Mat2 cat = m2(2, 1, 1, 1);
  const Circuit kc = chain(6, Boundary::Open, Mat2::identity(), &cat);
  EXPECT_EQ(exact_zero_exponents(kc), 0);
}

TEST(ExactZeros, BlochKinksOfTheAuditCase) {
  // Bond [[1,-1,2,-1],[-1,1,1,0],[0,-1,3,-1],[1,-1,0,0]], site [[1,1],[0,1]]:
  // two unit-circle eigenvalues collide and leave the circle at k0 = 2.66297
  // (the independent audit; recomputed in tests/cli/test_exact_zeros.py
  // from a sympy discriminant).
  Mat4 G;
  const std::int64_t g[16] = {1, -1, 2, -1, -1, 1, 1, 0, 0, -1, 3, -1, 1, -1, 0, 0};
  for (int i = 0; i < 16; ++i) G.a[static_cast<std::size_t>(i)] = g[i];
  const Mat2 site = m2(1, 1, 0, 1);
  const BlochExact be(G, &site);
  ASSERT_EQ(be.kinks().size(), 1u);
  EXPECT_NEAR(be.kinks()[0], 2.66297, 5e-6);
  ASSERT_EQ(be.arcs().size(), 2u);
  EXPECT_EQ(be.arcs()[0].on_circle, 2);  // one pair elliptic below k0
  EXPECT_EQ(be.arcs()[1].on_circle, 0);  // all hyperbolic above
  // The finite ring: two zero exponents at each momentum with |k| < k0.
  const RingZeros rz = be.ring_zeros(8);
  for (std::int64_t m = 0; m < 8; ++m) {
    const double k = 2 * kPi * static_cast<double>(std::min(m, 8 - m)) / 8.0;
    EXPECT_EQ(rz.per_momentum[static_cast<std::size_t>(m)], k < 2.66297 ? 2 : 0) << m;
  }
}

TEST(ExactZeros, GateWithoutChaos) {
  // Bond [[1,-1,1,1],[0,1,0,0],[0,1,0,-1],[0,0,1,1]] on a ring of 6: the
  // characteristic polynomial is (x-1)^2 (x^2+x+1)^2 (x^6+x^3+1), all
  // cyclotomic (the audit; sympy in tests/cli/test_exact_zeros.py).
  Mat4 G;
  const std::int64_t g[16] = {1, -1, 1, 1, 0, 1, 0, 0, 0, 1, 0, -1, 0, 0, 1, 1};
  for (int i = 0; i < 16; ++i) G.a[static_cast<std::size_t>(i)] = g[i];
  Circuit c;
  c.L = 6;
  c.boundary = Boundary::Periodic;
  c.bonds.assign(6, BondGate::symplectic(G));
  EXPECT_EQ(exact_zero_exponents(c), 12);
  const Spectrum s = bloch_spectrum(c);
  EXPECT_EQ(s.zero_rule, ZeroRule::Exact);
  EXPECT_EQ(s.zero_count, 12);
  EXPECT_TRUE(s.warning.empty()) << s.warning;
  for (double x : s.exponents) EXPECT_EQ(x, 0.0);
  const BulkLimit b = bulk_limit(c, 10);
  EXPECT_EQ(b.lambda_max, 0.0);
  EXPECT_EQ(b.ks_density, 0.0);
  EXPECT_TRUE(b.zero_certified);
}

}  // namespace
}  // namespace toral
