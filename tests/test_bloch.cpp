// Tests of the Bloch decomposition (kernels/bloch.cpp): the Bloch matrix
// against the assembled period matrix, finite-ring spectra against an
// independent dense LAPACK solve, closed forms (Arnold's cat map, Mahler
// measures) and the L -> infinity limit against large rings.
#include <gsl/gsl_sf_psi.h>
#include <gtest/gtest.h>

#include <complex>
#define lapack_complex_float std::complex<float>
#define lapack_complex_double std::complex<double>
#include <lapacke.h>

#include <algorithm>
#include <cmath>
#include <functional>
#include <limits>
#include <numbers>
#include <string>
#include <vector>

#include "bloch.hpp"
#include "model.hpp"
#include "spectrum.hpp"
#include "unit_circle.hpp"
#include "test_gates.hpp"

namespace toral {
namespace {

using cd = std::complex<double>;
constexpr double kPi = std::numbers::pi;
// ln((3 + sqrt 5) / 2), the exponent of Arnold's cat map [[2,1],[1,1]].
const double kCat = std::log((3.0 + std::sqrt(5.0)) / 2.0);

using testgates::m2;
using testgates::two_shear;
using testgates::coupling;
using testgates::local_pair;


Mat4 mul(const Mat4& x, const Mat4& y) { return checked_matmul(x, y); }

struct Spec {
  std::string name;
  BondGate bond;
  bool has_site = false;
  Mat2 site;
};

Spec pos(const std::string& n, const Mat2& A) {
  return {n, BondGate::position(A), false, Mat2::identity()};
}
Spec sym(const std::string& n, const Mat4& G) {
  return {n, BondGate::symplectic(G), false, Mat2::identity()};
}
Spec with_site(Spec s, const Mat2& g) {
  s.has_site = true;
  s.site = g;
  s.name += " + site " + to_string(g);
  return s;
}

Circuit ring(const Spec& s, std::int64_t L, Boundary b = Boundary::Periodic) {
  Circuit c;
  c.L = L;
  c.boundary = b;
  c.bonds.assign(static_cast<std::size_t>(c.bond_count()), s.bond);
  if (s.has_site) c.sites.assign(static_cast<std::size_t>(L), s.site);
  return c;
}

const Mat2 kCatMat = m2(2, 1, 1, 1);
const Mat2 kShear = m2(1, 1, 0, 1);

// Position gates: the cat map, shears, two-shears, and det -1 gates.
std::vector<Spec> position_specs() {
  std::vector<Spec> v = {pos("cat", kCatMat),
                         pos("shear", kShear),
                         pos("shear3", m2(1, 3, 0, 1)),
                         pos("swap", m2(0, 1, 1, 0)),
                         pos("fib", m2(1, 1, 1, 0)),
                         pos("det-1 [[1,2],[1,1]]", m2(1, 2, 1, 1)),
                         pos("det-1 [[2,1],[1,0]]", m2(2, 1, 1, 0))};
  const int ab[][2] = {{1, 2}, {2, 1}, {2, 3}, {-1, 2}, {3, -2}, {1, -1}};
  for (const auto& p : ab)
    v.push_back(
        pos("G(" + std::to_string(p[0]) + "," + std::to_string(p[1]) + ")", two_shear(p[0], p[1])));
  return v;
}

// Circuits whose Bloch matrix is 4x4: embeddings with a one-site layer and
// genuinely non-position symplectic bond gates.
std::vector<Spec> general_specs() {
  const Mat4 C = coupling();
  const Mat4 shears_C =
      mul(mul(embed_position_gate(kShear), embed_position_gate(m2(1, 0, 1, 1))), C);
  const Mat4 mixed = mul(mul(local_pair(kShear, m2(1, 0, 1, 1)), C), embed_position_gate(kCatMat));
  return {
      sym("embedded cat (4x4 path)", embed_position_gate(kCatMat)),
      with_site(pos("shear", kShear), kCatMat),
      with_site(pos("cat", kCatMat), kShear),
      with_site(pos("fib", m2(1, 1, 1, 0)), m2(1, 0, 1, 1)),
      sym("coupling C", C),
      sym("E(shear) E(shear^T) C", shears_C),
      with_site(sym("E(shear) E(shear^T) C", shears_C), kShear),
      with_site(sym("coupling C", C), kCatMat),
      sym("local pair * C * E(cat)", mixed),
      with_site(sym("local pair * C * E(cat)", mixed), m2(1, 0, -1, 1)),
  };
}

// Independent reference: ln|mu| of all eigenvalues of the dense 2L x 2L
// period matrix, from LAPACK dgeev on assemble_period(c).dense(), descending.
std::vector<double> dense_reference(const Circuit& c) {
  const SparseInt S = assemble_period(c);
  std::vector<double> a = S.dense();
  const lapack_int n = static_cast<lapack_int>(S.n);
  std::vector<double> wr(n), wi(n);
  const lapack_int info = LAPACKE_dgeev(LAPACK_ROW_MAJOR, 'N', 'N', n, a.data(), n, wr.data(),
                                        wi.data(), nullptr, 1, nullptr, 1);
  EXPECT_EQ(info, 0);
  std::vector<double> lam;
  for (lapack_int i = 0; i < n; ++i) lam.push_back(std::log(std::hypot(wr[i], wi[i])));
  std::sort(lam.begin(), lam.end(), std::greater<double>());
  return lam;
}

// The same with LAPACK's error estimate of each exponent (dgeevx condition
// numbers and the Jordan-cluster radius, toral::dense_eigenvalues), sorted
// together.
std::vector<std::pair<double, double>> dense_reference_with_errors(const Circuit& c) {
  const SparseInt S = assemble_period(c);
  const DenseEig e = dense_eigenvalues(S.dense(), S.n);
  std::vector<std::pair<double, double>> out;
  for (std::size_t i = 0; i < e.re.size(); ++i) {
    const double mod = std::hypot(e.re[i], e.im[i]);
    const double err = e.err[i] < mod ? std::log1p(e.err[i] / (mod - e.err[i])) : 1e300;
    out.emplace_back(std::log(mod), err);
  }
  std::sort(out.begin(), out.end(), [](const auto& a, const auto& b) { return a.first > b.first; });
  return out;
}

bool is_descending(const std::vector<double>& v) {
  return std::is_sorted(v.begin(), v.end(), std::greater<double>());
}

// Fraction of `values` per bin of `edges`, clamped into the end bins.
// Exponents within `zero` of 0 are the +-0 of elliptic pairs, whose rounding
// noise has no sign; as the pairs are exactly +-, they count half on each side
// of 0 (same bin when 0 is inside a bin).
std::vector<double> ring_histogram(const std::vector<double>& values,
                                   const std::vector<double>& edges, double zero) {
  const int bins = static_cast<int>(edges.size()) - 1;
  auto bin = [&](double v) {
    const int j =
        static_cast<int>(std::upper_bound(edges.begin(), edges.end(), v) - edges.begin()) - 1;
    return std::clamp(j, 0, bins - 1);
  };
  std::vector<double> h(bins, 0.0);
  for (double v : values) {
    if (std::abs(v) <= zero) {
      h[bin(std::abs(zero) * 0.5)] += 0.5;
      h[bin(-std::abs(zero) * 0.5)] += 0.5;
    } else {
      h[bin(v)] += 1.0;
    }
  }
  for (double& x : h) x /= static_cast<double>(values.size());
  return h;
}

double ring_ks_density(const Spectrum& s, std::int64_t L) {
  double h = 0.0;
  for (double x : s.exponents)
    if (x > 0) h += x;
  return h / static_cast<double>(L);
}

// ---------------------------------------------------------------------------
// The Bloch matrix itself: S applied to a plane wave is the plane wave of
// M(z) u. Source: definition of the Bloch matrix (Bloch's theorem; the
// derivation is in kernels/bloch.cpp).
TEST(BlochMatrix, PlaneWaveActionMatchesAssembledPeriod) {
  std::vector<Spec> specs = position_specs();
  for (const Spec& s : general_specs()) specs.push_back(s);
  for (const Spec& sp : specs)
    for (std::int64_t L : {2, 4, 8}) {
      const Circuit c = ring(sp, L);
      const SparseInt S = assemble_period(c);
      const std::int64_t N = L / 2;
      for (std::int64_t m = 0; m < N; ++m) {
        const double k = 2 * kPi * m / N;
        const cd z = std::polar(1.0, k);
        int dim = 0;
        const std::vector<cd> M = bloch_matrix(c, k, dim);
        ASSERT_EQ(dim, c.position_class() ? 2 : 4) << sp.name;
        const cd u[4] = {{0.3, -1.1}, {1.7, 0.2}, {-0.4, 0.9}, {0.8, 0.5}};
        // Global vector (q_0..q_{L-1}, p_0..p_{L-1}). Cell amplitudes on
        // (q_x, q_y) for dim 2 (momenta zero), (q_x, p_x, q_y, p_y) for dim 4.
        auto wave = [&](const cd* amp) {
          std::vector<cd> v(static_cast<std::size_t>(2 * L), 0.0);
          for (std::int64_t j = 0; j < N; ++j) {
            const cd ph = std::pow(z, static_cast<double>(j));
            if (dim == 2) {
              v[2 * j] = ph * amp[0];
              v[2 * j + 1] = ph * amp[1];
            } else {
              v[2 * j] = ph * amp[0];
              v[L + 2 * j] = ph * amp[1];
              v[2 * j + 1] = ph * amp[2];
              v[L + 2 * j + 1] = ph * amp[3];
            }
          }
          return v;
        };
        const std::vector<cd> v = wave(u);
        cd Mu[4] = {};
        for (int i = 0; i < dim; ++i)
          for (int j = 0; j < dim; ++j) Mu[i] += M[i * dim + j] * u[j];
        const std::vector<cd> expect = wave(Mu);
        for (std::int64_t i = 0; i < S.n; ++i) {
          cd Sv = 0.0;
          for (std::int64_t p = S.rowptr[i]; p < S.rowptr[i + 1]; ++p)
            Sv += double(S.val[p]) * v[S.col[p]];
          ASSERT_LT(std::abs(Sv - expect[i]), 1e-12)
              << sp.name << " L=" << L << " m=" << m << " row " << i;
        }
      }
    }
}

// Test 1. Bloch spectrum equals the dense diagonalisation of the assembled
// matrix. Source: Bloch's theorem (common practice); the dense solve is an
// independent LAPACK dgeevx call on assemble_period(c).dense(), and the
// number of exactly zero exponents is checked against the unit-circle census
// of the whole 2L x 2L integer characteristic polynomial (unit_circle.hpp:
// gcd, trace polynomial and Sturm sequence on det(x - S), an algorithm
// independent of the Bloch arcs and kinks; itself checked against sympy in
// tests/cli/test_exact_zeros.py).
TEST(BlochSpectrum, EqualsDenseDiagonalisation) {
  std::vector<Spec> specs = position_specs();
  for (const Spec& s : general_specs()) {
    ASSERT_TRUE(is_symplectic4(s.bond.G)) << s.name;  // exact integer check
    specs.push_back(s);
  }
  int with_zeros = 0, total = 0;
  for (const Spec& sp : specs)
    for (std::int64_t L : {2, 4, 6, 8, 12}) {
      const Circuit c = ring(sp, L);
      const Spectrum s = bloch_spectrum(c);
      const auto d = dense_reference_with_errors(c);
      ASSERT_EQ(s.method, Method::Bloch);
      ASSERT_EQ(s.exponents.size(), static_cast<std::size_t>(2 * L));
      ASSERT_EQ(s.errors.size(), s.exponents.size());
      ASSERT_TRUE(is_descending(s.exponents));
      ASSERT_EQ(s.zero_rule, ZeroRule::Exact) << sp.name << " L=" << L;
      EXPECT_EQ(s.zero_count, exact_zero_exponents(c)) << sp.name << " L=" << L;
      EXPECT_TRUE(s.warning.empty()) << s.warning;
      ++total;
      if (s.zero_count > 0) ++with_zeros;
      std::int64_t zeros = 0;
      for (std::size_t i = 0; i < s.exponents.size(); ++i) {
        zeros += s.exponents[i] == 0.0;
        // Each solver within its own error estimate of the other, 1e-9 floor:
        // a Jordan block of size p costs dgeevx ~eps^(1/p) (Wilkinson, The
        // Algebraic Eigenvalue Problem, ch. 2), which its estimate covers.
        const double tol = 1e-9 + s.errors[i] + d[i].second;
        EXPECT_NEAR(s.exponents[i], d[i].first, tol) << sp.name << " L=" << L << " i=" << i;
      }
      EXPECT_EQ(zeros, s.zero_count) << sp.name << " L=" << L;
    }
  // Both kinds are in the set: rings with exact zeros and rings without.
  EXPECT_GT(with_zeros, total / 5) << with_zeros << " of " << total;
  EXPECT_LT(with_zeros, total) << with_zeros << " of " << total;
}

// bloch_exponents returns the 4 exponents of S at momentum k, +- paired.
// Source: S = M (+) M^-T for position class; M(z)^H J M(z) = J otherwise
// (symplecticity of S restricted to a Bloch sector, common practice).
TEST(BlochExponents, FourPairedValuesPerMomentum) {
  std::vector<Spec> specs = position_specs();
  for (const Spec& s : general_specs()) specs.push_back(s);
  for (const Spec& sp : specs)
    for (double k : {0.0, 0.7, 2.1, kPi}) {
      const std::vector<double> e = bloch_exponents(ring(sp, 4), k);
      ASSERT_EQ(e.size(), 4u) << sp.name;
      EXPECT_TRUE(is_descending(e)) << sp.name;
      EXPECT_NEAR(e[0] + e[3], 0.0, 1e-7) << sp.name << " k=" << k;
      EXPECT_NEAR(e[1] + e[2], 0.0, 1e-7) << sp.name << " k=" << k;
    }
}

// Test 2. Arnold's cat map as a one-site layer with identity bonds: every
// exponent is +-ln((3+sqrt5)/2) = +-0.9624236501192069 (Arnold & Avez,
// Ergodic Problems of Classical Mechanics, 1968), and so are the bulk
// lambda_max and the KS entropy per site.
TEST(BlochCat, OneSiteCatLayer) {
  EXPECT_NEAR(kCat, 0.9624236501192069, 1e-15);  // Arnold & Avez (1968)
  for (const BondGate& b :
       {BondGate::position(Mat2::identity()), BondGate::symplectic(Mat4::identity())}) {
    Circuit c = ring({"id", b, true, kCatMat}, 10);
    const Spectrum s = bloch_spectrum(c);
    for (std::size_t i = 0; i < s.exponents.size(); ++i)
      EXPECT_NEAR(std::abs(s.exponents[i]), kCat, 1e-12) << i;  // Arnold & Avez (1968)
    EXPECT_NEAR(s.exponents.front(), kCat, 1e-12);
    EXPECT_NEAR(s.exponents.back(), -kCat, 1e-12);
    EXPECT_LT(s.pairing_defect, 1e-12);  // exact +- pairing of a symplectic spectrum
    EXPECT_LT(s.sum_defect, 1e-11);      // det S = 1
    const BulkLimit b40 = bulk_limit(c, 40);
    EXPECT_NEAR(b40.lambda_max, kCat, 1e-10);  // Arnold & Avez (1968)
    EXPECT_NEAR(b40.ks_density, kCat, 1e-10);  // Pesin/Sinai: h = sum of positive exponents
    // Every exponent sits at +-lambda_max: half the mass in each end bin.
    EXPECT_NEAR(b40.hist_counts.front(), 0.5, 1e-12);
    EXPECT_NEAR(b40.hist_counts.back(), 0.5, 1e-12);
  }
}

// Test 3. The bulk KS density is the limit of the finite-ring h/L. The ring
// value is the trapezoidal rule over the L/2 momenta: exponentially
// convergent for a periodic analytic integrand (uniformly hyperbolic gates;
// Trefethen & Weideman, SIAM Review 56 (2014)), O(h^2) with a kink
// (Euler-Maclaurin). The ring lambda_max never exceeds the sup over k.
TEST(BulkLimit, MatchesLargeRing) {
  struct Case {
    Spec sp;
    double tol;
  };
  const std::vector<Case> cases = {
      // min over k of the smallest |exponent| is > 0.9 for these three
      {pos("shear3", m2(1, 3, 0, 1)), 1e-9},
      {pos("det-1 [[1,2],[1,1]]", m2(1, 2, 1, 1)), 1e-9},
      {with_site(pos("shear", kShear), kCatMat), 1e-9},
      // exponents touch zero at k = pi (|k - pi| kink): O(h^2), h = 2pi/2000
      {pos("cat", kCatMat), 1e-5},
      {with_site(sym("coupling C", coupling()), kCatMat), 1e-4},
  };
  for (const Case& cs : cases) {
    const BulkLimit b = bulk_limit(ring(cs.sp, 2), 40);
    EXPECT_LT(b.accuracy, 1e-9) << cs.sp.name;
    const Spectrum s = bloch_spectrum(ring(cs.sp, 4000));
    EXPECT_NEAR(ring_ks_density(s, 4000), b.ks_density, cs.tol) << cs.sp.name;
    EXPECT_LE(s.exponents.front(), b.lambda_max + 1e-12) << cs.sp.name;  // sup over k
    // The ring samples k on a grid of spacing 2pi/2000: its maximum is within
    // O(h^2) of the sup at a smooth maximum (common practice).
    EXPECT_GT(s.exponents.front(), b.lambda_max - 1e-4) << cs.sp.name;
  }
  // Convergence order for the kinked cat gate: error(L) ~ C / L^2, so four
  // times the ring size cuts it by ~16 (Euler-Maclaurin; at least 8 here).
  const BulkLimit b = bulk_limit(ring(pos("cat", kCatMat), 2), 40);
  const double e1 = std::abs(
      ring_ks_density(bloch_spectrum(ring(pos("cat", kCatMat), 1000)), 1000) - b.ks_density);
  const double e4 = std::abs(
      ring_ks_density(bloch_spectrum(ring(pos("cat", kCatMat), 4000)), 4000) - b.ks_density);
  EXPECT_GT(e1, 0.0);
  EXPECT_LT(e4, e1 / 8.0);
}

// Test 4a. Closed form of the position-class Bloch matrix. From
// M(z) = [[A11, A10/z], [z A01, A00]] A (derived by hand in bloch.cpp):
// tr M(z) = 2 A00 A11 + A01^2 z + A10^2 / z and det M(z) = det(A)^2 = 1
// (exact algebra, common practice); the eigenvalues are the roots of
// x^2 - tr x + 1.
TEST(BlochClosedForm, PositionTraceDeterminantAndRoots) {
  for (const Spec& sp : position_specs()) {
    const Mat2& A = sp.bond.A;
    const double a00 = A(0, 0), a01 = A(0, 1), a10 = A(1, 0), a11 = A(1, 1);
    for (double k : {0.0, 0.4, 1.3, 2.9, kPi, 4.4}) {
      const cd z = std::polar(1.0, k);
      int dim = 0;
      const std::vector<cd> M = bloch_matrix(ring(sp, 6), k, dim);
      ASSERT_EQ(dim, 2);
      const cd tr = 2 * a00 * a11 + a01 * a01 * z + a10 * a10 / z;
      EXPECT_LT(std::abs(M[0] + M[3] - tr), 1e-12) << sp.name << " k=" << k;  // by hand
      EXPECT_LT(std::abs(M[0] * M[3] - M[1] * M[2] - 1.0), 1e-12)
          << sp.name << " k=" << k;  // det(A)^2
      // Roots of x^2 - tr x + 1 (quadratic formula), as exponents of S.
      const cd sq = std::sqrt(tr * tr - 4.0);
      const double l1 = std::log(std::abs((tr + sq) / 2.0)),
                   l2 = std::log(std::abs((tr - sq) / 2.0));
      std::vector<double> expect = {l1, l2, -l1, -l2};
      std::sort(expect.begin(), expect.end(), std::greater<double>());
      const std::vector<double> e = bloch_exponents(ring(sp, 6), k);
      for (int i = 0; i < 4; ++i) EXPECT_NEAR(e[i], expect[i], 1e-7) << sp.name << " k=" << k;
    }
  }
}

// Test 4b. Structure of the 4x4 Bloch matrix: M(z)^H J M(z) = J with the
// local form J = diag([[0,1],[-1,0]] x 2), hence det M(z) = 1 (S^T J S = J
// restricted to a Bloch sector; common practice). For the one-site cat layer
// with identity bonds M(z) = blockdiag(cat, cat): tr = 6.
TEST(BlochClosedForm, GeneralMatrixIsHermitianSymplectic) {
  const double J[4][4] = {{0, 1, 0, 0}, {-1, 0, 0, 0}, {0, 0, 0, 1}, {0, 0, -1, 0}};
  for (const Spec& sp : general_specs())
    for (double k : {0.0, 0.9, 2.5, kPi}) {
      int dim = 0;
      const std::vector<cd> M = bloch_matrix(ring(sp, 4), k, dim);
      ASSERT_EQ(dim, 4);
      for (int i = 0; i < 4; ++i)
        for (int j = 0; j < 4; ++j) {
          cd s = 0.0;
          for (int a = 0; a < 4; ++a)
            for (int b = 0; b < 4; ++b) s += std::conj(M[a * 4 + i]) * J[a][b] * M[b * 4 + j];
          EXPECT_LT(std::abs(s - J[i][j]), 1e-11) << sp.name << " k=" << k;
        }
    }
  int dim = 0;
  const std::vector<cd> M =
      bloch_matrix(ring({"id", BondGate::position(Mat2::identity()), true, kCatMat}, 2), 1.1, dim);
  EXPECT_LT(std::abs(M[0] + M[5] + M[10] + M[15] - 6.0), 1e-14);  // tr blockdiag(cat, cat)
}

// Test 4c. Mahler measures. By Jensen's formula the bulk KS entropy per site
// of a position-class circuit is the logarithmic Mahler measure of
// det(x - M(z)) = x^2 - tr(z) x + 1 (Lind, Schmidt & Ward, Invent. Math. 101
// (1990)). For the shear [[1,b],[0,1]], tr = 2 + b^2 z and the polynomial is
// (x-1)^2 - b^2 x z; Jensen in z gives m = ln b^2 + <ln+ (|x-1|^2 / b^2)>,
// = ln b^2 for b >= 2, and for b = 1 twice m(1 + x + y) =
// (3 sqrt3 / 2pi) L(chi_-3, 2) (Smyth, Bull. Austral. Math. Soc. 23 (1981)),
// with L(chi_-3, 2) = (psi'(1/3) - psi'(2/3)) / 9 from GSL's trigamma.
TEST(BlochClosedForm, MahlerMeasureOfShears) {
  for (int b : {2, 3, 4}) {
    const BulkLimit r = bulk_limit(ring(pos("shear", m2(1, b, 0, 1)), 2), 20);
    EXPECT_NEAR(r.ks_density, std::log(double(b) * b), 1e-9) << "b=" << b;  // Jensen / LSW (1990)
    EXPECT_LT(r.accuracy, 1e-9);
  }
  const double L3 = (gsl_sf_psi_1(1.0 / 3.0) - gsl_sf_psi_1(2.0 / 3.0)) / 9.0;
  EXPECT_NEAR(L3, 0.7813024128964862, 1e-13);  // L(chi_-3, 2), from memory
  const BulkLimit r = bulk_limit(ring(pos("shear", kShear), 2), 20);
  EXPECT_NEAR(r.ks_density, 3.0 * std::sqrt(3.0) / (2.0 * kPi) * L3, 1e-9);  // Smyth (1981)
  // The one-site cat layer: x^2 - 3x + 1, m = ln((3+sqrt5)/2) (LSW 1990).
  const BulkLimit c =
      bulk_limit(ring({"id", BondGate::position(Mat2::identity()), true, kCatMat}, 2), 20);
  EXPECT_NEAR(c.ks_density, kCat, 1e-10);
}

// Elliptic gates: [[1,1],[1,0]] has tr M(z) = 2 cos k (Test 4a formula), so
// every eigenvalue lies on the unit circle and every exponent is zero; the
// histogram then uses [-1, 1] and puts all mass in the two central bins.
TEST(BlochClosedForm, EllipticGateHasZeroSpectrum) {
  const BulkLimit b = bulk_limit(ring(pos("fib", m2(1, 1, 1, 0)), 2), 10);
  EXPECT_LT(b.lambda_max, 1e-7);  // exact value 0; sqrt(eps) at the Jordan point k = 0
  EXPECT_LT(b.ks_density, 1e-9);
  EXPECT_DOUBLE_EQ(b.hist_edges.front(), -1.0);
  EXPECT_DOUBLE_EQ(b.hist_edges.back(), 1.0);
  EXPECT_NEAR(b.hist_counts[4], 0.5, 1e-12);  // +0 and -0, half each
  EXPECT_NEAR(b.hist_counts[5], 0.5, 1e-12);
}

// Test 5. The bulk histogram sums to 1 and matches the histogram of a very
// large ring bin by bin (the ring is a Riemann sum over L/2 momenta; each
// bin-edge crossing costs O(1/L)). Source: definition of the exponent
// density (common practice).
TEST(BulkLimit, HistogramMatchesLargeRing) {
  const std::vector<Spec> specs = {
      pos("shear", kShear), pos("cat", kCatMat), with_site(pos("shear", kShear), kCatMat),
      with_site(sym("coupling C", coupling()), kCatMat),
      with_site(sym("E(shear) E(shear^T) C",
                    mul(mul(embed_position_gate(kShear), embed_position_gate(m2(1, 0, 1, 1))),
                        coupling())),
                kShear)};
  const std::int64_t L = 20000;
  for (const Spec& sp : specs)
    for (int bins : {40, 41}) {
      const BulkLimit b = bulk_limit(ring(sp, 2), bins);
      ASSERT_EQ(b.hist_counts.size(), static_cast<std::size_t>(bins));
      ASSERT_EQ(b.hist_edges.size(), static_cast<std::size_t>(bins) + 1);
      EXPECT_DOUBLE_EQ(b.hist_edges.front(), -b.lambda_max);
      EXPECT_DOUBLE_EQ(b.hist_edges.back(), b.lambda_max);
      double sum = 0.0;
      for (double x : b.hist_counts) {
        EXPECT_GE(x, 0.0);
        sum += x;
      }
      EXPECT_NEAR(sum, 1.0, 1e-12) << sp.name;  // a density: fractions of all exponents
      EXPECT_LT(b.hist_accuracy, 1e-9) << sp.name;
      const Spectrum s = bloch_spectrum(ring(sp, L));
      const std::vector<double> h =
          ring_histogram(s.exponents, b.hist_edges, std::max(1e-9, s.error_bound));
      for (int j = 0; j < bins; ++j)
        EXPECT_NEAR(h[j], b.hist_counts[j], 1e-3) << sp.name << " bins=" << bins << " bin " << j;
      // Mirror symmetry of a symplectic spectrum.
      for (int j = 0; j < bins; ++j)
        EXPECT_NEAR(b.hist_counts[j], b.hist_counts[bins - 1 - j], 1e-12);
    }
}

// The bulk limit depends only on the gates: any boundary, any L (see the
// comment at bulk_limit). Exact equality, since only the gates are read.
TEST(BulkLimit, IndependentOfRingSizeAndBoundary) {
  const Spec sp = with_site(pos("shear", kShear), kCatMat);
  const BulkLimit a = bulk_limit(ring(sp, 2), 16);
  const BulkLimit b = bulk_limit(ring(sp, 7, Boundary::Open), 16);
  EXPECT_EQ(a.lambda_max, b.lambda_max);
  EXPECT_EQ(a.ks_density, b.ks_density);
  EXPECT_EQ(a.hist_counts, b.hist_counts);
}

// error_bound is a real estimate: tiny for a normal Bloch matrix, and for an
// exactly defective one (identity bonds + one-site shear: M(z) =
// blockdiag(shear, shear), two Jordan blocks at 1, all exponents exactly 0)
// of order sqrt(eps) and at least the actual error. Sources: LAPACK Users'
// Guide sec. 4.8.1.3; Ostrowski-Elsner theorem (Stewart & Sun, Matrix
// Perturbation Theory, 1990, ch. IV).
TEST(BlochSpectrum, ErrorBoundTracksConditioning) {
  const Spectrum cat =
      bloch_spectrum(ring({"id", BondGate::position(Mat2::identity()), true, kCatMat}, 8));
  EXPECT_GT(cat.error_bound, 0.0);
  EXPECT_LT(cat.error_bound, 1e-13);
  EXPECT_EQ(cat.zero_count, 0);  // x^2 - 3x + 1 has no root on the circle
  // The parabolic shear on every site: det(x - S) = (x - 1)^(2L), every
  // exponent exactly 0 (a Jordan block at every momentum); Bloch returns
  // exact zeros.
  const Circuit jc = ring({"id", BondGate::position(Mat2::identity()), true, kShear}, 8);
  const Spectrum jordan = bloch_spectrum(jc);
  EXPECT_EQ(jordan.zero_rule, ZeroRule::Exact);
  EXPECT_EQ(jordan.zero_count, 16);
  for (double x : jordan.exponents) EXPECT_EQ(x, 0.0);
  EXPECT_EQ(jordan.error_bound, 0.0);
  for (const auto& [l, e] : dense_reference_with_errors(jc))
    EXPECT_LE(std::abs(l), e);  // the dense solver within its own estimate of the exact 0
  // [[1,1],[1,0]]: tr M(z) = 2 cos k (Test 4a), so every exponent is exactly
  // 0, with a Jordan block at k = 0.
  const Circuit fib = ring(pos("fib", m2(1, 1, 1, 0)), 12);
  const Spectrum f = bloch_spectrum(fib);
  EXPECT_EQ(f.zero_count, 24);
  for (double x : f.exponents) EXPECT_EQ(x, 0.0);
  double dense_dev = 0.0;
  for (double x : dense_reference(fib)) dense_dev = std::max(dense_dev, std::abs(x));
  EXPECT_GT(dense_dev, 1e-10);  // what a tolerance would have had to absorb
}

// Test 6. Errors: the finite-ring Bloch spectrum needs a translation-
// invariant periodic ring of even length; every bulk/matrix entry point
// needs translation invariance and valid gates.
TEST(BlochErrors, RejectsUnsuitableCircuits) {
  const Spec sp = pos("cat", kCatMat);
  Circuit disordered = ring(sp, 8);
  disordered.bonds[3] = BondGate::position(kShear);
  EXPECT_THROW(bloch_spectrum(disordered), ModelError);
  EXPECT_THROW(bulk_limit(disordered, 10), ModelError);
  int dim = 0;
  EXPECT_THROW(bloch_matrix(disordered, 0.0, dim), ModelError);
  EXPECT_THROW(bloch_exponents(disordered, 0.0), ModelError);
  try {
    bloch_spectrum(disordered);
  } catch (const ModelError& e) {
    EXPECT_NE(std::string(e.what()).find("bond 3"), std::string::npos) << e.what();
    EXPECT_NE(std::string(e.what()).find("translation invariant"), std::string::npos) << e.what();
  }
  Circuit site_disorder = ring(with_site(sp, kCatMat), 8);
  site_disorder.sites[5] = kShear;
  EXPECT_THROW(bloch_spectrum(site_disorder), ModelError);

  const Circuit open = ring(sp, 8, Boundary::Open);
  EXPECT_THROW(bloch_spectrum(open), ModelError);
  try {
    bloch_spectrum(open);
  } catch (const ModelError& e) {
    EXPECT_NE(std::string(e.what()).find("periodic"), std::string::npos) << e.what();
  }
  EXPECT_NO_THROW(bulk_limit(open, 10));  // bulk quantities ignore the boundary

  Circuit odd = ring(sp, 8);
  odd.L = 7;
  odd.bonds.resize(7);
  EXPECT_THROW(bloch_spectrum(odd), ModelError);

  Mat4 bad = Mat4::identity();
  bad(0, 1) = 1;
  bad(1, 0) = 1;  // det -1 on (q_a, p_a): not symplectic
  EXPECT_THROW(bloch_spectrum(ring(sym("bad", bad), 4)), ModelError);
  EXPECT_THROW(bulk_limit(ring(pos("bad", m2(2, 0, 0, 1)), 4), 10), ModelError);
  EXPECT_THROW(bulk_limit(ring(sp, 4), 0), std::invalid_argument);
}

// A million-site ring (the O(L) path at full size; timings belong in bench/,
// not here) still agrees with the bulk limit: uniformly hyperbolic gate, so
// the trapezoidal rule over the momenta converges exponentially (Trefethen &
// Weideman 2014) and the ring maximum is within O(h^2) of the sup.
TEST(BlochSpectrum, MillionSitesAgreesWithBulk) {
  const Spec sp = pos("shear3", m2(1, 3, 0, 1));
  const std::int64_t L = 1000000;
  const Spectrum s = bloch_spectrum(ring(sp, L));
  ASSERT_EQ(s.exponents.size(), static_cast<std::size_t>(2 * L));
  EXPECT_TRUE(is_descending(s.exponents));
  const BulkLimit b = bulk_limit(ring(sp, 2), 10);
  EXPECT_NEAR(ring_ks_density(s, L), b.ks_density, 1e-10);
  EXPECT_NEAR(s.exponents.front(), b.lambda_max, 1e-9);
  EXPECT_LE(s.exponents.front(), b.lambda_max + 1e-12);
  EXPECT_NEAR(b.ks_density, std::log(9.0), 1e-10);  // Mahler measure, Test 4c
}

}  // namespace
}  // namespace toral

// ---------------------------------------------------------------- bands

namespace toral {
namespace {

// The four exponents of momentum index m of a Bands result.
std::vector<double> band_at(const Bands& b, std::size_t m) {
  return {b.exponents.begin() + static_cast<std::ptrdiff_t>(4 * m),
          b.exponents.begin() + static_cast<std::ptrdiff_t>(4 * m + 4)};
}

// The ring's bands, flattened, are its spectrum: as a multiset they equal an
// independent dense LAPACK diagonalisation of the assembled S (within the
// two error estimates), for position-class and general 4x4 blocks, with and
// without exact zeros. Each momentum's four exponents are +- paired and its
// class says whether one is positive.
TEST(Bands, RingBandsAreTheDenseSpectrumAsAMultiset) {
  std::vector<Spec> specs = position_specs();
  for (const Spec& s : general_specs()) specs.push_back(s);
  int classes[3] = {0, 0, 0};
  for (const Spec& sp : specs)
    for (std::int64_t L : {4, 8, 12}) {
      const Circuit c = ring(sp, L);
      const Bands b = ring_bands(c);
      const std::size_t n = static_cast<std::size_t>(L / 2);
      ASSERT_EQ(b.k.size(), n) << sp.name;
      ASSERT_EQ(b.exponents.size(), 4 * n);
      ASSERT_EQ(b.errors.size(), 4 * n);
      ASSERT_EQ(b.classes.size(), n);
      EXPECT_TRUE(b.exact) << sp.name << ": " << b.note;
      std::vector<std::pair<double, double>> all;
      for (std::size_t m = 0; m < n; ++m) {
        EXPECT_NEAR(b.k[m], 2 * kPi * static_cast<double>(m) / static_cast<double>(n), 1e-15);
        const std::vector<double> e = band_at(b, m);
        EXPECT_TRUE(is_descending(e)) << sp.name;
        for (int j = 0; j < 4; ++j) {
          all.emplace_back(e[static_cast<std::size_t>(j)], b.errors[4 * m + static_cast<std::size_t>(j)]);
          EXPECT_NEAR(e[static_cast<std::size_t>(j)], -e[static_cast<std::size_t>(3 - j)], 1e-9 + 2 * b.errors[4 * m]);
        }
        const int cls = b.classes[m];
        ASSERT_GE(cls, 0);
        ASSERT_LE(cls, 2);
        ++classes[cls];
        EXPECT_EQ(cls == static_cast<int>(BlockClass::Hyperbolic), e[0] > 0.0) << sp.name << " L=" << L << " m=" << m;
        if (cls != static_cast<int>(BlockClass::Hyperbolic)) EXPECT_EQ(e[0], 0.0);  // exact zeros
      }
      std::sort(all.begin(), all.end(), [](const auto& x, const auto& y) { return x.first > y.first; });
      const auto d = dense_reference_with_errors(c);
      ASSERT_EQ(d.size(), all.size());
      for (std::size_t i = 0; i < all.size(); ++i)
        EXPECT_NEAR(all[i].first, d[i].first, 1e-9 + all[i].second + d[i].second) << sp.name << " L=" << L << " i=" << i;
      // the same values as bloch_spectrum (one computation behind both)
      const Spectrum s = bloch_spectrum(c);
      for (std::size_t i = 0; i < all.size(); ++i) EXPECT_EQ(all[i].first, s.exponents[i]) << sp.name;
    }
  // every class occurs in the set
  EXPECT_GT(classes[0], 0);
  EXPECT_GT(classes[1], 0);
  EXPECT_GT(classes[2], 0);
}

// The bulk bands at the ring's momenta in [0, pi] are the ring's bands there
// (the blocks depend on the gates and k only), class included.
TEST(Bands, BulkBandsAtRingMomentaAreTheRingBands) {
  std::vector<Spec> specs = position_specs();
  for (const Spec& s : general_specs()) specs.push_back(s);
  for (const Spec& sp : specs) {
    const std::int64_t L = 12;
    const Bands r = ring_bands(ring(sp, L));
    std::vector<double> ks;
    for (std::size_t m = 0; m <= 3; ++m) ks.push_back(r.k[m]);  // 0, pi/3, 2pi/3, pi of 6 cells
    ks.back() = kPi;
    const Bands b = bulk_bands(ring(sp, 2, Boundary::Open), ks);  // any boundary, any L
    ASSERT_EQ(b.k.size(), ks.size());
    for (std::size_t m = 0; m < ks.size(); ++m) {
      const std::vector<double> x = band_at(b, m), y = band_at(r, m);
      for (std::size_t j = 0; j < 4; ++j)
        EXPECT_NEAR(x[j], y[j], 1e-9 + b.errors[4 * m + j] + r.errors[4 * m + j]) << sp.name << " m=" << m;
      EXPECT_EQ(b.classes[m], r.classes[m]) << sp.name << " m=" << m;
    }
  }
}

// Worked example: the position gate A = [[1, 2], [-2, -3]] (det 1). The trace
// of its 2x2 block is tau(k) = 2 A00 A11 + A10^2 e^{-ik} + A01^2 e^{ik}
// = -6 + 8 cos k (derived at the top of kernels/bloch.cpp and checked against
// the assembled period by BlochMatrix.PlaneWaveActionMatchesAssembledPeriod),
// so |tau| <= 2 (elliptic, exponents 0) exactly for cos k >= 1/2, i.e. on
// [0, pi/3], with kinks (tau = +-2, colliding eigenvalues) at k = 0 and
// pi/3; beyond, the exponents are +-arccosh(|tau|/2), twice each. At k = pi:
// arccosh(7) = ln(7 + sqrt 48), which a dense diagonalisation of the L = 4
// ring (momenta 0 and pi) must also contain.
TEST(Bands, ClosedFormEllipticThenHyperbolic) {
  const Spec sp = pos("A", m2(1, 2, -2, -3));
  std::vector<double> ks;
  for (int i = 0; i <= 60; ++i) ks.push_back(kPi * i / 60.0);
  ks.push_back(kPi / 3.0);
  const Bands b = bulk_bands(ring(sp, 2), ks);
  ASSERT_TRUE(b.exact) << b.note;
  for (std::size_t m = 0; m < ks.size(); ++m) {
    const double tau = -6.0 + 8.0 * std::cos(ks[m]);
    const double lam = std::abs(tau) > 2.0 ? std::acosh(std::abs(tau) / 2.0) : 0.0;
    const std::vector<double> e = band_at(b, m);
    EXPECT_NEAR(e[0], lam, 1e-12) << ks[m];
    EXPECT_NEAR(e[1], lam, 1e-12) << ks[m];
    EXPECT_NEAR(e[3], -lam, 1e-12) << ks[m];
    const bool kink = ks[m] == 0.0 || std::abs(ks[m] - kPi / 3.0) < 1e-14;
    const int want = kink ? 1 : ks[m] < kPi / 3.0 ? 0 : 2;
    EXPECT_EQ(b.classes[m], want) << ks[m];
    if (want != 2) EXPECT_EQ(e[0], 0.0) << ks[m];  // exactly zero, not within a tolerance
  }
  const BandArcs a = band_arcs(ring(sp, 2));
  ASSERT_EQ(a.lo.size(), 2u);
  EXPECT_EQ(a.lo[0], 0.0);
  EXPECT_NEAR(a.hi[0], kPi / 3.0, 1e-14);
  EXPECT_NEAR(a.lo[1], kPi / 3.0, 1e-14);
  EXPECT_EQ(a.hi[1], kPi);
  EXPECT_EQ(a.on_circle, (std::vector<int>{4, 0}));
  EXPECT_EQ(a.classes, (std::vector<int>{0, 2}));
  ASSERT_EQ(a.kinks.size(), 2u);
  EXPECT_EQ(a.kinks[0], 0.0);
  EXPECT_NEAR(a.kinks[1], kPi / 3.0, 1e-14);
  const auto d = dense_reference_with_errors(ring(sp, 4));
  EXPECT_NEAR(d.front().first, std::log(7.0 + std::sqrt(48.0)), 1e-10);
  EXPECT_NEAR(band_at(b, 60)[0], std::log(7.0 + std::sqrt(48.0)), 1e-12);
}

}  // namespace
}  // namespace toral
