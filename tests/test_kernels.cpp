// Unit tests of the pure kernels: exact model assembly, dense spectra,
// summaries, bounds, families and draws. Each numeric check names its source.
#include <gtest/gtest.h>

#include <cmath>
#include <limits>
#include <map>
#include <random>

#include "bounds.hpp"
#include "families.hpp"
#include "model.hpp"
#include "spectrum.hpp"
#include "test_gates.hpp"

using namespace toral;

namespace {

const double kCat = 0.9624236501192069;  // ln((3+sqrt 5)/2)

using testgates::m2;

Circuit uniform_position(std::int64_t L, Boundary bc, const Mat2& A) {
  Circuit c;
  c.L = L;
  c.boundary = bc;
  c.bonds.assign(static_cast<std::size_t>(c.bond_count()), BondGate::position(A));
  return c;
}

Circuit sites_only(std::int64_t L, const Mat2& g) {
  Circuit c;
  c.L = L;
  c.boundary = Boundary::Open;
  c.bonds.assign(static_cast<std::size_t>(c.bond_count()), BondGate::position(Mat2::identity()));
  c.sites.assign(static_cast<std::size_t>(L), g);
  return c;
}

// A random integer symplectic 4x4 gate: a product of elementary symplectic
// shears on (q_a,p_a,q_b,p_b) (generators of Sp(4,Z); common practice).
Mat4 random_symplectic4(std::mt19937_64& rng) {
  std::uniform_int_distribution<int> pick(0, 3), coef(-1, 1);
  Mat4 G = Mat4::identity();
  for (int step = 0; step < 4; ++step) {
    const int c = coef(rng) == 0 ? 1 : coef(rng);
    G = checked_matmul(testgates::elementary_shear4(pick(rng), c), G);
  }
  return G;
}

Circuit random_symplectic_circuit(std::int64_t L, Boundary bc, std::mt19937_64& rng, bool sites) {
  Circuit c;
  c.L = L;
  c.boundary = bc;
  for (std::int64_t b = 0; b < c.bond_count(); ++b) c.bonds.push_back(BondGate::symplectic(random_symplectic4(rng)));
  if (sites) {
    std::uniform_int_distribution<int> d(-2, 2);
    for (std::int64_t i = 0; i < L; ++i) c.sites.push_back(family_matrix("shear2", {d(rng), d(rng)}));
  }
  return c;
}

}  // namespace

// --- exact assembly -------------------------------------------------------

TEST(Model, PeriodIsSymplecticExactly) {
  // S^T J S = J with J = [[0, I], [-I, 0]] is the definition of Sp(2L, Z).
  std::mt19937_64 rng(7);
  for (int trial = 0; trial < 10; ++trial) {
    const Circuit c = random_symplectic_circuit(6, trial % 2 ? Boundary::Open : Boundary::Periodic, rng, trial % 3 == 0);
    const SparseInt S = assemble_period(c);
    const std::int64_t L = c.L, n = 2 * L;
    for (std::int64_t i = 0; i < n; ++i)
      for (std::int64_t j = 0; j < n; ++j) {
        // (S^T J S)_{ij} = sum_k S_{ki} (J S)_{kj}, (J S)_{kj} = S_{k+L,j} (k < L), -S_{k-L,j} (k >= L)
        std::int64_t s = 0;
        for (std::int64_t k = 0; k < n; ++k) {
          const std::int64_t js = k < L ? S.at(k + L, j) : -S.at(k - L, j);
          s += S.at(k, i) * js;
        }
        const std::int64_t J = (i < L && j == i + L) ? 1 : (i >= L && j == i - L) ? -1 : 0;
        ASSERT_EQ(s, J) << "trial " << trial << " entry " << i << "," << j;
      }
  }
}

TEST(Model, PositionClassSplitsIntoMAndInverseTranspose) {
  // S = M (+) M^-T for position-class gates (see docs/model.md): check the
  // q-q block is M, the off-diagonal blocks vanish, and M^T * (p-p block) = I.
  const Circuit c = uniform_position(8, Boundary::Periodic, m2(2, 1, 1, 1));
  const SparseInt S = assemble_period(c), M = assemble_position_block(c);
  const std::int64_t L = c.L;
  for (std::int64_t i = 0; i < L; ++i)
    for (std::int64_t j = 0; j < L; ++j) {
      EXPECT_EQ(S.at(i, j), M.at(i, j));
      EXPECT_EQ(S.at(i, L + j), 0);
      EXPECT_EQ(S.at(L + i, j), 0);
      std::int64_t s = 0;
      for (std::int64_t k = 0; k < L; ++k) s += M.at(k, i) * S.at(L + k, L + j);
      EXPECT_EQ(s, i == j ? 1 : 0);
    }
}

TEST(Model, ValidationNamesTheGate) {
  Circuit c = uniform_position(6, Boundary::Periodic, m2(1, 1, 0, 1));
  c.bonds[3] = BondGate::position(m2(2, 0, 0, 1));  // det 2
  try {
    c.validate();
    FAIL() << "det 2 accepted";
  } catch (const ModelError& e) {
    EXPECT_NE(std::string(e.what()).find("bond 3"), std::string::npos) << e.what();
    EXPECT_NE(std::string(e.what()).find("det 2"), std::string::npos) << e.what();
  }
  Circuit odd = uniform_position(5, Boundary::Periodic, m2(1, 1, 0, 1));
  odd.bonds.resize(5);
  EXPECT_THROW(odd.validate(), ModelError);
  Mat4 bad = Mat4::identity();
  bad(0, 0) = 2;
  EXPECT_THROW(validate_symplectic_gate(bad, "bond 0"), ModelError);
  Circuit s = sites_only(4, m2(1, 1, 1, 0));  // det -1 is not allowed on a site
  EXPECT_THROW(s.validate(), ModelError);
}

TEST(Model, OverflowIsDetectedNotWrapped) {
  // Two layers of the shear [[1, x], [0, 1]] put x^2 into M (q_1 picks up
  // x q_2 + x^2 q_3): x = 2^40 needs 2^80 > int64 and must throw; x = 2^20 fits.
  const std::int64_t big = std::int64_t(1) << 40, small = std::int64_t(1) << 20;
  EXPECT_THROW(checked_mul(big, big), OverflowError);
  EXPECT_THROW(checked_add(std::numeric_limits<std::int64_t>::max(), 1), OverflowError);
  EXPECT_THROW(assemble_position_block(uniform_position(4, Boundary::Periodic, m2(1, big, 0, 1))), OverflowError);
  EXPECT_THROW(assemble_period(uniform_position(4, Boundary::Periodic, m2(1, big, 0, 1))), OverflowError);
  const SparseInt M = assemble_position_block(uniform_position(4, Boundary::Periodic, m2(1, small, 0, 1)));
  EXPECT_EQ(M.at(1, 3), small * small);
}

// --- dense spectra ----------------------------------------------------------

TEST(Dense, ArnoldCatMap) {
  // Arnold & Avez, Ergodic Problems of Classical Mechanics (1968):
  // [[2,1],[1,1]] has lambda = ln((3+sqrt5)/2) = 0.9624236501192069.
  const Spectrum s = dense_spectrum(sites_only(2, m2(2, 1, 1, 1)));
  ASSERT_EQ(s.exponents.size(), 4u);
  EXPECT_NEAR(s.exponents[0], kCat, 1e-12);
  EXPECT_NEAR(s.exponents[1], kCat, 1e-12);
  EXPECT_NEAR(s.exponents[2], -kCat, 1e-12);
  EXPECT_NEAR(s.exponents[3], -kCat, 1e-12);
  EXPECT_LT(s.error_bound, 1e-12);
}

TEST(Dense, TwoByTwoExponentDependsOnlyOnTrace) {
  // Standard: eigenvalues of a det-1 2x2 map solve mu^2 - tr mu + 1 = 0, so
  // lambda = arccosh(|tr|/2) for |tr| > 2 and 0 otherwise.
  for (std::int64_t a = -4; a <= 4; ++a)
    for (std::int64_t b = -4; b <= 4; ++b) {
      const Mat2 g = family_matrix("cat", {a, b});  // trace a + b
      const double tr = static_cast<double>(a + b);
      const double expect = std::fabs(tr) > 2 ? std::acosh(std::fabs(tr) / 2) : 0.0;
      const Spectrum s = dense_spectrum(sites_only(2, g));
      // |tr| = 2 is a Jordan block: the eigenvalue is only accurate to sqrt(eps).
      const double tol = std::fabs(tr) == 2 ? 1e-7 : 1e-10;
      EXPECT_NEAR(s.exponents.front(), expect, tol) << "a=" << a << " b=" << b;
    }
}

TEST(Dense, ShearBrickWallOpenIsUnipotentPeriodicIsChaotic) {
  // Common practice: with A = [[1,1],[0,1]] on an open chain M is upper
  // triangular with unit diagonal (all exponents 0); closing the ring makes
  // some exponents positive.
  for (std::int64_t L : {4, 8, 16, 33}) {
    const Spectrum open = dense_spectrum(uniform_position(L, Boundary::Open, m2(1, 1, 0, 1)));
    for (double x : open.exponents) EXPECT_NEAR(x, 0.0, 1e-12) << "L=" << L;
  }
  for (std::int64_t L : {4, 8, 16, 32}) {
    const Spectrum ring = dense_spectrum(uniform_position(L, Boundary::Periodic, m2(1, 1, 0, 1)));
    EXPECT_GT(ring.exponents.front(), 0.1) << "L=" << L;
  }
}

TEST(Dense, PairingAndSumRuleOnRandomSymplecticCircuits) {
  // Symplectic spectra are closed under mu -> 1/mu (the characteristic
  // polynomial is palindromic) and det S = 1: exponents pair to zero and sum
  // to zero (common practice).
  std::mt19937_64 rng(2024);
  for (int trial = 0; trial < 12; ++trial) {
    const Circuit c = random_symplectic_circuit(2 * (1 + trial % 5), trial % 2 ? Boundary::Open : Boundary::Periodic,
                                                rng, trial % 3 != 0);
    const Spectrum s = dense_spectrum(c);
    ASSERT_EQ(s.exponents.size(), static_cast<std::size_t>(2 * c.L));
    // The reported error bound must cover the observed defects (an exponent
    // pair can be off by twice the bound), and both stay small.
    EXPECT_GT(s.error_bound, 0.0);
    EXPECT_LE(s.pairing_defect, 2 * s.error_bound + 1e-13) << "trial " << trial;
    EXPECT_LE(s.sum_defect, 2 * c.L * s.error_bound + 1e-12) << "trial " << trial;
    EXPECT_LT(s.pairing_defect, 1e-6) << "trial " << trial;
    for (std::size_t i = 1; i < s.exponents.size(); ++i) EXPECT_GE(s.exponents[i - 1], s.exponents[i]);
  }
}

TEST(Dense, PositionBlockMatchesFullMatrix) {
  // spec(S) = spec(M) u 1/spec(M) (docs/model.md): the M shortcut must equal a
  // diagonalisation of the whole 2L x 2L matrix.
  std::mt19937_64 rng(11);
  std::uniform_int_distribution<int> d(-2, 2);
  Circuit c = uniform_position(10, Boundary::Periodic, Mat2::identity());
  for (auto& b : c.bonds) b = BondGate::position(family_matrix("shear2", {d(rng), d(rng)}));
  const Spectrum fast = dense_spectrum(c);
  const SparseInt S = assemble_period(c);
  const DenseEig e = dense_eigenvalues(S.dense(), S.n);
  std::vector<double> full;
  for (std::size_t i = 0; i < e.re.size(); ++i) full.push_back(std::log(std::hypot(e.re[i], e.im[i])));
  std::sort(full.rbegin(), full.rend());
  ASSERT_EQ(full.size(), fast.exponents.size());
  for (std::size_t i = 0; i < full.size(); ++i) EXPECT_NEAR(full[i], fast.exponents[i], 1e-9);
}

// --- summary and bounds -----------------------------------------------------

TEST(Summary, KsRateAndCounts) {
  // Pesin's formula for a linear map: h = sum of the positive exponents.
  const Spectrum s = dense_spectrum(sites_only(6, m2(2, 1, 1, 1)));
  SummaryOptions o;
  o.bins = 10;
  const ChaosSummary cs = summarize(s, 6, o);
  EXPECT_NEAR(cs.lambda_max, kCat, 1e-12);
  EXPECT_NEAR(cs.ks_rate, 6 * kCat, 1e-10);
  EXPECT_NEAR(cs.ks_density, kCat, 1e-11);
  EXPECT_EQ(cs.unstable_count, 6);
  EXPECT_EQ(cs.kept.size(), 12u);
  double total = 0;
  for (double x : cs.hist_counts) total += x;
  EXPECT_NEAR(total, 1.0, 1e-15);
  // half the exponents sit in the top bin, half in the bottom one
  EXPECT_NEAR(cs.hist_counts.front(), 0.5, 1e-15);
  EXPECT_NEAR(cs.hist_counts.back(), 0.5, 1e-15);
  o.keep_all = 4;
  o.top = 3;
  EXPECT_EQ(summarize(s, 6, o).kept.size(), 3u);
}

TEST(Bounds, LyapunovRateAndCaps) {
  // Definitions (Bianchi, Hackl & Yokomizo, JHEP 03 (2018) 025; docs/bounds):
  // Lambda_ell = sum of the 2 min(ell, L-ell) largest exponents <= h; the
  // Hilbert cap min(ell, L-ell) ln N; the light-cone rate 2 c ln N; the
  // Ehrenfest time ln N / lambda_max.
  std::mt19937_64 rng(5);
  const Circuit c = random_symplectic_circuit(12, Boundary::Periodic, rng, true);
  const Spectrum s = dense_spectrum(c);
  const ChaosSummary cs = summarize(s, c.L, SummaryOptions{});
  BoundsInput in;
  in.L = c.L;
  in.boundary = Boundary::Periodic;
  in.top = s.exponents;
  in.lambda_max = cs.lambda_max;
  in.ks_rate = cs.ks_rate;
  const std::vector<std::int64_t> ells = {1, 2, 3, 6, 9, 11, 12, 0};
  const std::vector<std::int64_t> Ns = {2, 5};
  const Bounds b = entanglement_bounds(in, ells, Ns);
  for (std::size_t i = 0; i < ells.size(); ++i) {
    const std::int64_t ell = ells[i];
    if (ell < 1 || ell >= c.L) {
      EXPECT_TRUE(std::isnan(b.lyapunov_rate[i]));
      continue;
    }
    const std::int64_t m = 2 * std::min(ell, c.L - ell);
    double sum = 0;
    for (std::int64_t k = 0; k < m; ++k) sum += s.exponents[static_cast<std::size_t>(k)];
    EXPECT_DOUBLE_EQ(b.lyapunov_rate[i], sum);
    EXPECT_LE(b.lyapunov_rate[i], cs.ks_rate + 1e-12);
    for (std::size_t j = 0; j < Ns.size(); ++j) {
      const double cap = static_cast<double>(std::min(ell, c.L - ell)) * std::log(static_cast<double>(Ns[j]));
      EXPECT_DOUBLE_EQ(b.hilbert_cap[i * Ns.size() + j], cap);
      EXPECT_DOUBLE_EQ(b.saturation_lightcone[i * Ns.size() + j], cap / (4 * std::log(double(Ns[j]))));
      if (b.lyapunov_rate[i] > 0) { EXPECT_DOUBLE_EQ(b.saturation_lyapunov[i * Ns.size() + j], cap / b.lyapunov_rate[i]); }
    }
  }
  // symmetric under ell -> L - ell (pure global state)
  EXPECT_DOUBLE_EQ(b.lyapunov_rate[0], b.lyapunov_rate[5]);
  EXPECT_DOUBLE_EQ(b.lyapunov_rate[2], b.lyapunov_rate[4]);
  for (std::size_t j = 0; j < Ns.size(); ++j)
    EXPECT_DOUBLE_EQ(b.ehrenfest_time[j], std::log(double(Ns[j])) / cs.lambda_max);
  // a block inside a ring has two cuts (1 <= ell <= L - 1); ell = L none; ell = 0 is no block
  EXPECT_EQ(b.cuts, (std::vector<std::int64_t>{2, 2, 2, 2, 2, 2, 0, -1}));
  for (std::size_t i = 0; i < ells.size(); ++i)
    for (std::size_t j = 0; j < Ns.size(); ++j) {
      const double lc = b.lightcone_rate[i * Ns.size() + j];
      if (ells[i] >= 1 && ells[i] < c.L)
        EXPECT_DOUBLE_EQ(lc, 4 * std::log(double(Ns[j])));
      else
        EXPECT_TRUE(std::isnan(lc));
    }
  // Fewer known exponents than needed: NaN, never a partial sum.
  in.top.resize(3);
  EXPECT_TRUE(std::isnan(lyapunov_rate(in.top, c.L, 2)));
  EXPECT_FALSE(std::isnan(lyapunov_rate(in.top, c.L, 1)));
}

TEST(Bounds, CutsPerBlockSize) {
  // Counted by hand from the bond definition (kernels/model.hpp: bond b joins
  // b and b + 1 mod L; L bonds on a ring, L - 1 on an open chain), and
  // checked against boundary_cuts of the same site sets in test_entangle.
  for (std::int64_t ell = 1; ell <= 7; ++ell) EXPECT_EQ(block_cuts(8, Boundary::Periodic, false, ell), 2);
  EXPECT_EQ(block_cuts(8, Boundary::Periodic, false, 8), 0);
  // an open chain, block in the bulk: strictly inside needs ell <= L - 2
  EXPECT_EQ(block_cuts(8, Boundary::Open, false, 1), 2);
  EXPECT_EQ(block_cuts(8, Boundary::Open, false, 6), 2);
  EXPECT_EQ(block_cuts(8, Boundary::Open, false, 7), 1);  // touches an end
  EXPECT_EQ(block_cuts(8, Boundary::Open, false, 8), 0);
  // at the edge: one cut
  for (std::int64_t ell = 1; ell <= 7; ++ell) EXPECT_EQ(block_cuts(8, Boundary::Open, true, ell), 1);
  EXPECT_EQ(block_cuts(8, Boundary::Open, true, 8), 0);
  EXPECT_EQ(block_cuts(2, Boundary::Open, false, 1), 1);  // L = 2: no room inside
  for (std::int64_t ell : {0, -1, 9}) EXPECT_EQ(block_cuts(8, Boundary::Open, false, ell), -1);
  // the bounds use them per ell: light-cone 2 c ln N, saturation cap / (2 c ln N)
  BoundsInput in;
  in.L = 8;
  in.boundary = Boundary::Open;
  in.top.assign(16, 0.5);
  in.lambda_max = 0.5;
  const Bounds b = entanglement_bounds(in, {6, 7}, {3});
  EXPECT_EQ(b.cuts, (std::vector<std::int64_t>{2, 1}));
  EXPECT_DOUBLE_EQ(b.lightcone_rate[0], 4 * std::log(3.0));
  EXPECT_DOUBLE_EQ(b.lightcone_rate[1], 2 * std::log(3.0));
  EXPECT_DOUBLE_EQ(b.saturation_lightcone[1], 1 * std::log(3.0) / (2 * std::log(3.0)));
}

TEST(Bounds, RatioOverRateRule) {
  // docs/bounds.md: x / rate for rate > 0; over a zero (or negative) rate
  // +inf for x > 0, -inf for x < 0, NaN for 0; NaN in, NaN out.
  const double inf = std::numeric_limits<double>::infinity(), nan = std::numeric_limits<double>::quiet_NaN();
  EXPECT_DOUBLE_EQ(rate_ratio(3.0, 2.0), 1.5);
  EXPECT_EQ(rate_ratio(1e-3, 0.0), inf);
  EXPECT_EQ(rate_ratio(-1e-3, 0.0), -inf);
  EXPECT_TRUE(std::isnan(rate_ratio(0.0, 0.0)));
  EXPECT_EQ(rate_ratio(2.0, -0.0), inf);
  EXPECT_EQ(rate_ratio(2.0, -1e-17), inf);  // a negative rate counts as zero
  EXPECT_TRUE(std::isnan(rate_ratio(nan, 1.0)));
  EXPECT_TRUE(std::isnan(rate_ratio(1.0, nan)));
  // every saturation time follows it: a circuit without chaos (all exponents
  // exactly 0) never reaches the cap at its Lyapunov rate
  BoundsInput in;
  in.L = 6;
  in.top.assign(12, 0.0);
  in.lambda_max = 0.0;
  const Bounds b = entanglement_bounds(in, {2}, {2});
  EXPECT_EQ(b.lyapunov_rate[0], 0.0);
  EXPECT_EQ(b.saturation_lyapunov[0], inf);
  EXPECT_EQ(b.ehrenfest_time[0], inf);
  EXPECT_DOUBLE_EQ(b.saturation_lightcone[0], 2 * std::log(2.0) / (4 * std::log(2.0)));
}

// --- families and draws -----------------------------------------------------

TEST(Families, ShearIsProductOfShears) {
  // Definition: G(a, b) = [[1, a], [0, 1]] [[1, 0], [b, 1]].
  for (std::int64_t a = -3; a <= 3; ++a)
    for (std::int64_t b = -3; b <= 3; ++b) {
      EXPECT_EQ(family_matrix("shear2", {a, b}), checked_matmul(m2(1, a, 0, 1), m2(1, 0, b, 1)));
      const Mat2 c = family_matrix("cat", {a, b});
      EXPECT_EQ(det2(c), 1);
      EXPECT_EQ(c(0, 0) + c(1, 1), a + b);
    }
  EXPECT_EQ(family_matrix("cat", {2, 1}), m2(2, 1, 1, 1));  // Arnold's cat
}

TEST(Draws, StreamKeyHashIsFnv1a64) {
  // FNV-1a-64 test vectors (Fowler-Noll-Vo reference suite, from memory, and
  // recomputed from the definition in Python;
  // the same values are checked for io's config hash in test_journal.cpp).
  EXPECT_EQ(fnv1a64(""), 0xcbf29ce484222325ull);
  EXPECT_EQ(fnv1a64("a"), 0xaf63dc4c8601ec8cull);
  EXPECT_EQ(fnv1a64("foobar"), 0x85944171f73967e8ull);
}

TEST(Draws, CounterBasedAndUniform) {
  // Same key and counter, same value, whatever was drawn before (Random123's
  // Philox is a pure function of counter and key: Salmon et al., SC11, 2011).
  const auto a = draw_uniform(3, 99, 17, 1, 1, -2, 2);
  for (int i = 0; i < 100; ++i) (void)draw_uniform(3, 99, static_cast<std::uint64_t>(i), 0, 1, -2, 2);
  EXPECT_EQ(a, draw_uniform(3, 99, 17, 1, 1, -2, 2));
  // Uniform on -2..2: each frequency within 5 sigma of 1/5 (common practice).
  std::map<std::int64_t, int> hist;
  const int n = 100000;
  for (int i = 0; i < n; ++i) ++hist[draw_uniform(1, 2, static_cast<std::uint64_t>(i), 0, 1, -2, 2)];
  ASSERT_EQ(hist.size(), 5u);
  const double sigma = std::sqrt(n * 0.2 * 0.8);
  for (const auto& [v, k] : hist) {
    EXPECT_GE(v, -2);
    EXPECT_LE(v, 2);
    EXPECT_LT(std::fabs(k - n * 0.2), 5 * sigma) << v;
  }
  // Different seeds give different streams.
  int same = 0;
  for (int i = 0; i < 1000; ++i)
    same += draw_uniform(1, 2, static_cast<std::uint64_t>(i), 0, 1, 0, 1 << 30) ==
            draw_uniform(2, 2, static_cast<std::uint64_t>(i), 0, 1, 0, 1 << 30);
  EXPECT_LT(same, 5);
}

TEST(Summary, HistogramSplitsNoisyZerosEvenly) {
  // Exponents that are zero up to rounding carry no sign; with 0 on a bin
  // edge each counts half on either side (common practice for symmetric data).
  std::vector<double> counts, edges;
  histogram({1.0, -1.0, 1e-13, -2e-13, 3e-14, 0.0}, -1.0, 1.0, 4, counts, edges, 1e-12);
  ASSERT_EQ(counts.size(), 4u);
  EXPECT_DOUBLE_EQ(counts[1], counts[2]);
  EXPECT_DOUBLE_EQ(counts[1] + counts[2], 4.0 / 6.0);
  EXPECT_DOUBLE_EQ(counts[0], 1.0 / 6.0);
  EXPECT_DOUBLE_EQ(counts[3], 1.0 / 6.0);
  histogram({1e-13, -1e-13}, -1.0, 1.0, 3, counts, edges, 1e-12);  // 0 mid-bin
  EXPECT_DOUBLE_EQ(counts[1], 1.0);
}
