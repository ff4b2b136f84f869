// Tests of the exact Gaussian entanglement kernel (kernels/gaussian_exact).
// Each numeric check names its source beside it.
#include <gtest/gtest.h>
#include <lapacke.h>

#include <arb.h>
#include <flint/fmpz.h>

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <random>
#include <string>
#include <vector>

#include "gaussian_exact.hpp"
#include "model.hpp"
#include "spectrum.hpp"
#include "test_gates.hpp"

using namespace toral;

namespace {

using testgates::m2;

Mat2 shear(std::int64_t a, std::int64_t b) { return testgates::two_shear(a, b); }  // [[1+ab, a], [b, 1]], det 1

// Deterministic draw in [lo, hi] from the standardised mt19937_64 stream
// (std::uniform_int_distribution differs between standard libraries).
std::int64_t draw(std::mt19937_64& rng, std::int64_t lo, std::int64_t hi) {
  return lo + static_cast<std::int64_t>(rng() % static_cast<std::uint64_t>(hi - lo + 1));
}

// A random integer symplectic 4x4 gate on (q_a, p_a, q_b, p_b): a product of
// elementary symplectic shears, generators of Sp(4, Z) (common practice).
Mat4 random_symplectic4(std::mt19937_64& rng, int steps) {
  Mat4 G = Mat4::identity();
  for (int s = 0; s < steps; ++s) {
    const std::int64_t c = draw(rng, 0, 1) ? 1 : -1;
    G = checked_matmul(testgates::elementary_shear4(static_cast<int>(draw(rng, 0, 3)), c), G);
  }
  return G;
}

enum class Kind { Position, PositionWithSites, Symplectic };

// True when the 4x4 gate on (q_a, p_a, q_b, p_b) couples a to b and b to a.
bool couples_both_ways(const Mat4& G) {
  bool ab = false, ba = false;
  for (int i = 0; i < 2; ++i)
    for (int j = 0; j < 2; ++j) {
      ab = ab || G(i, 2 + j) != 0;
      ba = ba || G(2 + i, j) != 0;
    }
  return ab && ba;
}

// Random brick-wall circuits whose every bond gate couples its two sites both
// ways (so the lattice does not split into independent pieces). Position-class
// bonds are shears [[1+ab, a], [b, 1]] with a, b in [-amp, amp] \ {0}; the
// optional one-site layer has shears with a, b in [-amp, amp].
Circuit random_circuit(std::int64_t L, Boundary bc, Kind kind, std::mt19937_64& rng, std::int64_t amp) {
  Circuit c;
  c.L = L;
  c.boundary = bc;
  auto nonzero = [&]() {
    const std::int64_t v = draw(rng, 1, amp);
    return draw(rng, 0, 1) ? v : -v;
  };
  for (std::int64_t b = 0; b < c.bond_count(); ++b) {
    if (kind == Kind::Symplectic) {
      Mat4 G = random_symplectic4(rng, 6);
      while (!couples_both_ways(G)) G = random_symplectic4(rng, 6);
      c.bonds.push_back(BondGate::symplectic(G));
    } else {
      c.bonds.push_back(BondGate::position(shear(nonzero(), nonzero())));
    }
  }
  if (kind != Kind::Position)
    for (std::int64_t i = 0; i < L; ++i) c.sites.push_back(shear(draw(rng, -amp, amp), draw(rng, -amp, amp)));
  return c;
}

std::vector<GaussianSite> vacuum(std::int64_t L) {
  return std::vector<GaussianSite>(static_cast<std::size_t>(L));
}

GaussianSite squeezed(std::int64_t num, std::int64_t den) {
  GaussianSite g;
  g.num = num;
  g.den = den;
  g.squeezed = true;
  return g;
}

std::vector<GaussianSite> random_state(std::int64_t L, std::mt19937_64& rng) {
  const GaussianSite choices[] = {GaussianSite{}, squeezed(3, 2), squeezed(1, 3), squeezed(2, 1),
                                  squeezed(5, 7)};
  std::vector<GaussianSite> s;
  for (std::int64_t i = 0; i < L; ++i) s.push_back(choices[draw(rng, 0, 4)]);
  return s;
}

// Row-major dense double products (entries are exact integers while < 2^53).
std::vector<double> matmul(const std::vector<double>& a, const std::vector<double>& b, std::int64_t n) {
  std::vector<double> c(static_cast<std::size_t>(n * n), 0.0);
  for (std::int64_t i = 0; i < n; ++i)
    for (std::int64_t k = 0; k < n; ++k) {
      const double x = a[static_cast<std::size_t>(i * n + k)];
      if (x == 0.0) continue;
      for (std::int64_t j = 0; j < n; ++j)
        c[static_cast<std::size_t>(i * n + j)] += x * b[static_cast<std::size_t>(k * n + j)];
    }
  return c;
}

// sigma_A(t) in doubles: R = P_A S^t, sigma_A = R sigma0 R^T (2k x 2k).
std::vector<double> float_sigma_A(const Circuit& c, const std::vector<GaussianSite>& init,
                                  const std::vector<std::int64_t>& region, std::int64_t t,
                                  double* max_entry) {
  const std::int64_t L = c.L, n = 2 * L, k = static_cast<std::int64_t>(region.size());
  const std::vector<double> S = assemble_period(c).dense();
  std::vector<double> St(static_cast<std::size_t>(n * n), 0.0);
  for (std::int64_t i = 0; i < n; ++i) St[static_cast<std::size_t>(i * n + i)] = 1.0;
  for (std::int64_t s = 0; s < t; ++s) St = matmul(St, S, n);
  if (max_entry) {
    *max_entry = 0.0;
    for (double x : St) *max_entry = std::max(*max_entry, std::fabs(x));
  }
  std::vector<double> d(static_cast<std::size_t>(n));
  for (std::int64_t i = 0; i < L; ++i) {
    const GaussianSite& g = init[static_cast<std::size_t>(i)];
    const double s = g.squeezed ? static_cast<double>(g.num) / static_cast<double>(g.den) : 1.0;
    d[static_cast<std::size_t>(i)] = s / 2;
    d[static_cast<std::size_t>(L + i)] = 1 / (2 * s);
  }
  std::vector<std::int64_t> rows;
  for (std::int64_t a : region) rows.push_back(a);
  for (std::int64_t a : region) rows.push_back(L + a);
  std::vector<double> sig(static_cast<std::size_t>(4 * k * k), 0.0);
  for (std::int64_t a = 0; a < 2 * k; ++a)
    for (std::int64_t b = 0; b < 2 * k; ++b) {
      double s = 0.0;
      for (std::int64_t j = 0; j < n; ++j)
        s += St[static_cast<std::size_t>(rows[static_cast<std::size_t>(a)] * n + j)] *
             d[static_cast<std::size_t>(j)] *
             St[static_cast<std::size_t>(rows[static_cast<std::size_t>(b)] * n + j)];
      sig[static_cast<std::size_t>(a * 2 * k + b)] = s;
    }
  return sig;
}

// Williamson eigenvalues with LAPACK: eigenvalues of J sigma are +-i nu_j;
// returns the k moduli, descending (each appears twice among the 2k).
std::vector<double> lapack_williamson(const std::vector<double>& sig, std::int64_t k) {
  const std::int64_t n = 2 * k;
  std::vector<double> Js(static_cast<std::size_t>(n * n));
  for (std::int64_t i = 0; i < k; ++i)
    for (std::int64_t j = 0; j < n; ++j) {
      Js[static_cast<std::size_t>(i * n + j)] = sig[static_cast<std::size_t>((i + k) * n + j)];
      Js[static_cast<std::size_t>((i + k) * n + j)] = -sig[static_cast<std::size_t>(i * n + j)];
    }
  std::vector<double> wr(static_cast<std::size_t>(n)), wi(static_cast<std::size_t>(n));
  const lapack_int info =
      LAPACKE_dgeev(LAPACK_ROW_MAJOR, 'N', 'N', static_cast<lapack_int>(n), Js.data(),
                    static_cast<lapack_int>(n), wr.data(), wi.data(), nullptr, 1, nullptr, 1);
  EXPECT_EQ(info, 0);
  std::vector<double> mod(static_cast<std::size_t>(n));
  for (std::int64_t i = 0; i < n; ++i)
    mod[static_cast<std::size_t>(i)] =
        std::hypot(wr[static_cast<std::size_t>(i)], wi[static_cast<std::size_t>(i)]);
  std::sort(mod.begin(), mod.end(), std::greater<double>());
  std::vector<double> nu;
  for (std::int64_t i = 0; i < k; ++i)
    nu.push_back(0.5 * (mod[static_cast<std::size_t>(2 * i)] + mod[static_cast<std::size_t>(2 * i + 1)]));
  return nu;
}

// The textbook formula, evaluated naively in double.
double naive_f(double nu) {
  if (nu <= 0.5) return 0.0;
  return (nu + 0.5) * std::log(nu + 0.5) - (nu - 0.5) * std::log(nu - 0.5);
}

Circuit cat_pair(Boundary bc) {
  Circuit c;
  c.L = 2;
  c.boundary = bc;
  c.bonds.assign(static_cast<std::size_t>(c.bond_count()), BondGate::position(m2(2, 1, 1, 1)));
  return c;
}

bool overlap(double a, double ra, double b, double rb) { return std::fabs(a - b) <= ra + rb; }

void expect_certified(const EntropyCurve& r, double target = 1e-12) {
  EXPECT_EQ(r.failures, 0);
  EXPECT_EQ(r.charpoly_fallbacks, 0);
  EXPECT_EQ(r.root_fallbacks, 0);
  for (std::size_t t = 0; t < r.entropy.size(); ++t) {
    EXPECT_TRUE(r.met_target[t]) << "t = " << t;
    // Below S = 8192 the double midpoint's half ulp is < 1e-12, so the whole
    // certified radius meets the target.
    if (std::fabs(r.entropy[t]) < 8192) {
      EXPECT_LE(r.radius[t], target) << "t = " << t;
    }
  }
}

}  // namespace

// --- 1. Arnold's cat map on two sites ----------------------------------------

TEST(GaussianExact, CatMapTwoSitesSlopeAndS18) {
  // One cat map A = [[2,1],[1,1]] per period on two sites (the open chain
  // L = 2: its only bond is the even bond (0,1)), so S = A (+) A^-T with
  // exponents +-ln((3+sqrt 5)/2), each twice.
  const Circuit c = cat_pair(Boundary::Open);
  const EntropyCurve r = gaussian_entropy_curve(c, vacuum(2), {0}, 40);
  expect_certified(r);
  // Rate Lambda_1 = sum of the 2 largest exponents = 2 ln((3+sqrt 5)/2)
  // (Bianchi, Hackl & Yokomizo, JHEP 03 (2018) 025; cat-map exponent from
  // Arnold & Avez 1968).
  EXPECT_NEAR(r.entropy[40] - r.entropy[39], 1.9248473002384139, 1e-9);
  // S(18) = 34.149385267514452723: mpmath at 50 digits (Debian python3-mpmath)
  // from the exact rows of A^18 and A^-18^T in Python integers, sigma_A =
  // diag(a^2 + b^2, c^2 + d^2)/2 with (a, b) = (24157817, 14930352),
  // (c, d) = (9227465, -14930352), nu = sqrt(det sigma_A) and
  // f(nu) = (nu + 1/2) ln(nu + 1/2) - (nu - 1/2) ln(nu - 1/2).
  EXPECT_NEAR(r.entropy[18], 34.149385267514452723, 1e-12);
  EXPECT_LE(r.radius[18], 1e-12);

  // Why exactness matters: the same point evaluated plainly in float64 (S^t,
  // sigma_A and its Williamson value with LAPACK, then the textbook formula
  // for f) gives 33.0 there:
  // nu ~ 2.5e14 is still accurate, but (nu+1/2)ln(nu+1/2) - (nu-1/2)ln(nu-1/2)
  // cancels ~8e15 against ~8e15 at an ulp of 1.
  double max_entry = 0;
  const std::vector<double> sig = float_sigma_A(c, vacuum(2), {0}, 18, &max_entry);
  ASSERT_LT(max_entry, 9e15);  // S^18 itself is exact in double
  const std::vector<double> nu_f = lapack_williamson(sig, 1);
  EXPECT_GT(std::fabs(naive_f(nu_f[0]) - r.entropy[18]), 0.5);  // float64 is wrong
}

TEST(GaussianExact, CatMapTwoSitesClosedForm) {
  // A^t = [[F_{2t+1}, F_{2t}], [F_{2t}, F_{2t-1}]] (Fibonacci matrix
  // identity; from memory) and F_n^2 + F_{n+1}^2 = F_{2n+1} (from memory)
  // give, for region {0} in the vacuum, sigma_A = diag(F_{4t+1}, F_{4t-1})/2
  // and nu(t) = sqrt(F_{4t+1} F_{4t-1}) / 2. Reference: that closed form
  // evaluated here with arb at 512 bits (reference library: arb).
  const Circuit c = cat_pair(Boundary::Open);
  EntropyOptions opt;
  opt.keep_spectrum = true;
  const std::int64_t T = 60;
  const EntropyCurve r = gaussian_entropy_curve(c, vacuum(2), {0}, T, opt);
  expect_certified(r);
  const slong prec = 512;
  fmpz_t f1, f2;
  fmpz_init(f1);
  fmpz_init(f2);
  arb_t nu, a, b, S;
  arb_init(nu);
  arb_init(a);
  arb_init(b);
  arb_init(S);
  for (std::int64_t t = 1; t <= T; ++t) {
    fmpz_fib_ui(f1, static_cast<ulong>(4 * t + 1));
    fmpz_fib_ui(f2, static_cast<ulong>(4 * t - 1));
    fmpz_mul(f1, f1, f2);
    arb_set_fmpz(nu, f1);
    arb_sqrt(nu, nu, prec);
    arb_mul_2exp_si(nu, nu, -1);
    // f(nu) = (nu+1/2) ln(nu+1/2) - (nu-1/2) ln(nu-1/2), textbook form.
    arb_set_d(a, 0.5);
    arb_add(a, nu, a, prec);
    arb_log(b, a, prec);
    arb_mul(S, a, b, prec);
    arb_set_d(a, 0.5);
    arb_sub(a, nu, a, prec);
    arb_log(b, a, prec);
    arb_mul(b, a, b, prec);
    arb_sub(S, S, b, prec);
    const double ref = arf_get_d(arb_midref(S), ARF_RND_NEAR);
    ASSERT_LT(mag_get_d(arb_radref(S)), 1e-30);
    EXPECT_LE(std::fabs(r.entropy[static_cast<std::size_t>(t)] - ref),
              r.radius[static_cast<std::size_t>(t)] + 1e-15 * ref)
        << "t = " << t;
    const double nu_ref = arf_get_d(arb_midref(nu), ARF_RND_NEAR);
    EXPECT_NEAR(r.nu[static_cast<std::size_t>(t)][0], nu_ref, 1e-15 * nu_ref) << "t = " << t;
  }
  arb_clear(nu);
  arb_clear(a);
  arb_clear(b);
  arb_clear(S);
  fmpz_clear(f1);
  fmpz_clear(f2);
}

TEST(GaussianExact, CatMapPeriodicPairRate) {
  // The periodic ring with L = 2 applies A on bond (0,1) and again on bond
  // (1,0) each period: M = [[1,1],[1,2]] [[2,1],[1,1]] = [[3,2],[4,3]] (hand
  // computation from the brick-wall definition, docs/model.md), eigenvalues
  // 3 +- 2 sqrt 2, so Lambda_1 = 2 ln(3 + 2 sqrt 2) (Bianchi, Hackl &
  // Yokomizo 2018). Also against LAPACK's spectrum (toral::dense_spectrum).
  const Circuit c = cat_pair(Boundary::Periodic);
  const SparseInt M = assemble_position_block(c);
  EXPECT_EQ(M.at(0, 0), 3);  // hand computation above
  EXPECT_EQ(M.at(0, 1), 2);
  EXPECT_EQ(M.at(1, 0), 4);
  EXPECT_EQ(M.at(1, 1), 3);
  const Spectrum sp = dense_spectrum(c);
  const double rate = 2 * std::log(3 + 2 * std::sqrt(2.0));
  EXPECT_NEAR(sp.exponents[0] + sp.exponents[1], rate, 1e-12);  // reference library: LAPACK
  const EntropyCurve r = gaussian_entropy_curve(c, vacuum(2), {1}, 40);
  expect_certified(r);
  EXPECT_NEAR(r.entropy[40] - r.entropy[39], rate, 1e-9);
}

// --- 2. Pure and product states ---------------------------------------------

TEST(GaussianExact, ProductStatesHaveZeroEntropyExactly) {
  // A product state has S_A = 0 for every region (common practice); the
  // Williamson values are all exactly 1/2, so the result is exactly 0 with
  // radius exactly 0.
  std::mt19937_64 rng(11);
  for (int trial = 0; trial < 6; ++trial) {
    const Kind kind = trial % 3 == 0   ? Kind::Position
                      : trial % 3 == 1 ? Kind::PositionWithSites
                                       : Kind::Symplectic;
    const Circuit c = random_circuit(8, trial % 2 ? Boundary::Open : Boundary::Periodic, kind, rng, 2);
    const std::vector<GaussianSite> init = random_state(8, rng);
    const std::vector<std::int64_t> region = {1, 2, 5};
    const EntropyCurve r = gaussian_entropy_curve(c, init, region, 2);
    EXPECT_EQ(r.entropy[0], 0.0);  // product state at t = 0 (common practice)
    EXPECT_EQ(r.radius[0], 0.0);
    EXPECT_EQ(r.pure_modes[0], 3);
    EXPECT_GT(r.entropy[2], 0.1);  // and the entangling circuit does entangle (common practice)
  }
  // The empty region has S = 0 (common practice).
  std::mt19937_64 rng2(1);
  const EntropyCurve e = gaussian_entropy_curve(
      random_circuit(6, Boundary::Periodic, Kind::Symplectic, rng2, 2), vacuum(6), {}, 5);
  for (std::size_t t = 0; t < e.entropy.size(); ++t) {
    EXPECT_EQ(e.entropy[t], 0.0);
    EXPECT_EQ(e.radius[t], 0.0);
  }
  // Identity gates keep the vacuum a product state (common practice).
  Circuit id;
  id.L = 6;
  id.boundary = Boundary::Periodic;
  id.bonds.assign(6, BondGate::position(Mat2::identity()));
  const EntropyCurve r = gaussian_entropy_curve(id, vacuum(6), {0, 1, 2}, 20);
  for (std::size_t t = 0; t < r.entropy.size(); ++t) {
    EXPECT_EQ(r.entropy[t], 0.0);
    EXPECT_EQ(r.radius[t], 0.0);
  }
}

TEST(GaussianExact, OneSiteGatesKeepSqueezedStatesPure) {
  // One-site symplectic maps act on each mode separately, so a product of
  // single-mode squeezed states stays a product of pure states: S_A = 0
  // (common practice), exactly, with radius 0.
  Circuit c;
  c.L = 4;
  c.boundary = Boundary::Open;
  c.bonds.assign(3, BondGate::position(Mat2::identity()));
  c.sites = {m2(2, 1, 1, 1), shear(1, -2), m2(1, 1, 0, 1), shear(-2, 1)};
  const std::vector<GaussianSite> init = {squeezed(3, 2), squeezed(1, 5), GaussianSite{}, squeezed(7, 3)};
  const EntropyCurve r = gaussian_entropy_curve(c, init, {0, 3}, 30);
  for (std::size_t t = 0; t < r.entropy.size(); ++t) {
    EXPECT_EQ(r.entropy[t], 0.0) << "t = " << t;
    EXPECT_EQ(r.radius[t], 0.0) << "t = " << t;
    EXPECT_EQ(r.pure_modes[t], 2) << "t = " << t;
  }
  EXPECT_GT(r.bits[30], 20);  // the rows did grow: S^30 is far from the identity
  // The whole lattice of an entangling circuit is still pure (common practice).
  std::mt19937_64 rng(3);
  const Circuit g = random_circuit(6, Boundary::Periodic, Kind::Symplectic, rng, 2);
  const EntropyCurve all = gaussian_entropy_curve(g, random_state(6, rng), {0, 1, 2, 3, 4, 5}, 15);
  for (std::size_t t = 0; t < all.entropy.size(); ++t) {
    EXPECT_EQ(all.entropy[t], 0.0);
    EXPECT_EQ(all.pure_modes[t], 6);
  }
}

// --- 3. Against LAPACK at small t --------------------------------------------

TEST(GaussianExact, WilliamsonValuesMatchLapackAtSmallT) {
  // Where float64 is accurate (t <= 5, gates with entries in -1..1, and
  // ||sigma_A||_F <= 1e5, so that LAPACK's backward error eps ||J sigma_A||
  // is <= 2e-11 and even eigenvalue condition numbers ~ 50 keep the forward
  // error below 1e-9), the Williamson values from LAPACK dgeev on J sigma_A
  // (reference library: LAPACK) match ours to 1e-9 (relative above 1).
  std::mt19937_64 rng(5);
  const std::vector<std::vector<std::int64_t>> regions = {{0}, {2, 3}, {0, 3, 4}, {5, 1}};
  int compared = 0;
  for (int trial = 0; trial < 6; ++trial) {
    const Kind kind = trial % 3 == 0   ? Kind::Position
                      : trial % 3 == 1 ? Kind::PositionWithSites
                                       : Kind::Symplectic;
    const Circuit c = random_circuit(6, trial % 2 ? Boundary::Open : Boundary::Periodic, kind, rng, 1);
    const std::vector<GaussianSite> init = random_state(6, rng);
    for (const auto& region : regions) {
      EntropyOptions opt;
      opt.keep_spectrum = true;
      const EntropyCurve r = gaussian_entropy_curve(c, init, region, 5, opt);
      expect_certified(r);
      const std::int64_t k = static_cast<std::int64_t>(region.size());
      for (std::int64_t t = 1; t <= 5; ++t) {
        const std::vector<double> sig = float_sigma_A(c, init, region, t, nullptr);
        double norm = 0;
        for (double x : sig) norm += x * x;
        if (std::sqrt(norm) > 1e5) continue;  // outside float64's accurate range (above)
        const std::vector<double> nu = lapack_williamson(sig, k);
        double S = 0;
        for (std::int64_t j = 0; j < k; ++j) {
          const double ours = r.nu[static_cast<std::size_t>(t)][static_cast<std::size_t>(j)];
          EXPECT_NEAR(ours, nu[static_cast<std::size_t>(j)], 1e-9 * std::max(1.0, ours))
              << "trial " << trial << " t " << t << " j " << j;
          EXPECT_GE(ours, 0.5);  // uncertainty principle (common practice)
          S += naive_f(std::max(0.5, nu[static_cast<std::size_t>(j)]));
        }
        EXPECT_NEAR(r.entropy[static_cast<std::size_t>(t)], S, 1e-9 * std::max(1.0, S));
        ++compared;
      }
    }
  }
  EXPECT_GE(compared, 60);  // the accurate range was actually exercised
}

// --- 4. Late-time slope = Lyapunov rate -----------------------------------------

namespace {

struct RateCase {
  Circuit c;
  std::int64_t ell = 1;
  double rate = 0;
};

// Exponents of M (position block), descending, with LAPACK.
std::vector<double> position_exponents(const Circuit& c) {
  const SparseInt M = assemble_position_block(c);
  const DenseEig e = dense_eigenvalues(M.dense(), M.n);
  std::vector<double> x;
  for (std::size_t i = 0; i < e.re.size(); ++i) x.push_back(std::log(std::hypot(e.re[i], e.im[i])));
  std::sort(x.begin(), x.end(), std::greater<double>());
  return x;
}

}  // namespace

TEST(GaussianExact, LateSlopeIsTheLyapunovRate) {
  // S_A(t) ~ Lambda_A t with Lambda_A the sum of the 2|A| largest Lyapunov
  // exponents (Bianchi, Hackl & Yokomizo, JHEP 03 (2018) 025), exponents from
  // LAPACK (toral::dense_spectrum). Circuits are kept only if generic at the
  // cut: the top 2l+1 exponents are pairwise >= 0.02 apart (no complex pairs
  // or degeneracies among them), the cut gap lambda_2l - lambda_{2l+1} is
  // >= 0.15 and lambda_2l >= 0.15. The approach to the rate is exponential in
  // t with the cut gap (the row space of P_A S^t converges to the top
  // Oseledets subspace; f(nu) - ln(e nu) = O(nu^-2)), so at t = 190..200 the
  // slope error is ~e^{-0.15*190} ~ 4e-13 times an O(1) prefactor: 1e-6 leaves
  // a wide margin.
  //
  // Position-class circuits: S = M (+) M^-T keeps the q-p product initial
  // state q-p decoupled (sigma_A = X (+) Z), so prod nu^2 = det X det Z grows
  // with the l largest exponents of M plus the l largest of M^-T (volume
  // growth of l rows of M^t; derived here). For the brick-wall of det-1 2x2
  // gates spec(M) is symmetric (m_i = -m_{L+1-i}; checked below on each
  // circuit), so every exponent of S is doubly degenerate and that rate is
  // 2(m_1 + ... + m_l) = Lambda_l; genericity is then required of M's
  // exponents m_1..m_{l+1} instead (same thresholds).
  std::mt19937_64 rng(2024);
  std::vector<RateCase> cases;
  const Kind kinds[] = {Kind::Position, Kind::PositionWithSites, Kind::Symplectic};
  const std::int64_t sizes[] = {6, 8, 10, 12};
  auto generic_cut = [](const std::vector<double>& x, std::int64_t cut) {
    if (x[static_cast<std::size_t>(cut - 1)] - x[static_cast<std::size_t>(cut)] < 0.15) return false;
    if (x[static_cast<std::size_t>(cut - 1)] < 0.15) return false;
    for (std::int64_t i = 0; i < cut; ++i)
      if (x[static_cast<std::size_t>(i)] - x[static_cast<std::size_t>(i + 1)] < 0.02) return false;
    return true;
  };
  // Two accepted circuits for each (kind, l), l = 1, 2, 3, over L = 6..12.
  int found[3][4] = {};
  for (int attempt = 0; attempt < 6000 && cases.size() < 18; ++attempt) {
    const int ki = attempt % 3;
    const Kind kind = kinds[ki];
    const std::int64_t ell = 1 + (attempt / 3) % 3;
    const std::int64_t L = sizes[(attempt / 9) % 4];
    if (found[ki][ell] >= 2) continue;
    RateCase rc;
    rc.c = random_circuit(L, Boundary::Periodic, kind, rng, 2);
    rc.ell = ell;
    const Spectrum sp = dense_spectrum(rc.c);
    if (sp.error_bound > 1e-9) continue;  // near-defective: not generic
    const auto& x = sp.exponents;
    double rate = 0;
    for (std::int64_t i = 0; i < 2 * ell; ++i) rate += x[static_cast<std::size_t>(i)];
    if (kind == Kind::Position) {
      const std::vector<double> m = position_exponents(rc.c);
      if (!generic_cut(m, ell)) continue;
      double pc = 0;
      for (std::int64_t i = 0; i < ell; ++i)
        pc += m[static_cast<std::size_t>(i)] - m[static_cast<std::size_t>(L - 1 - i)];
      ASSERT_NEAR(pc, rate, 1e-9);  // symmetric spec(M): both rates agree (see above)
    } else if (!generic_cut(x, 2 * ell)) {
      continue;
    }
    rc.rate = rate;
    cases.push_back(rc);
    ++found[ki][ell];
  }
  ASSERT_EQ(cases.size(), 18u);  // every (kind, l) is covered
  const std::int64_t T = 200;
  for (const RateCase& rc : cases) {
    std::vector<std::int64_t> region;
    for (std::int64_t i = 0; i < rc.ell; ++i) region.push_back(1 + i);
    const EntropyCurve r = gaussian_entropy_curve(rc.c, vacuum(rc.c.L), region, T);
    expect_certified(r);
    const double slope = (r.entropy[T] - r.entropy[T - 10]) / 10;
    EXPECT_NEAR(slope, rc.rate, 1e-6) << "L = " << rc.c.L << ", l = " << rc.ell
                                      << (rc.c.position_class() ? " (position class)" : " (general)");
  }
}

// --- 5. Pure global state: S_A = S_complement ------------------------------------

TEST(GaussianExact, ComplementHasTheSameEntropy) {
  // The global state stays pure, so A and its complement have the same
  // symplectic spectrum apart from 1/2's and S_A = S_B (common practice);
  // certified balls must overlap.
  std::mt19937_64 rng(17);
  for (int trial = 0; trial < 6; ++trial) {
    const std::int64_t L = trial < 3 ? 8 : 10;
    const Kind kind = trial % 3 == 0   ? Kind::Position
                      : trial % 3 == 1 ? Kind::PositionWithSites
                                       : Kind::Symplectic;
    const Circuit c = random_circuit(L, trial % 2 ? Boundary::Open : Boundary::Periodic, kind, rng, 2);
    const std::vector<GaussianSite> init = random_state(L, rng);
    std::vector<std::int64_t> A, B;
    for (std::int64_t i = 0; i < L; ++i) (draw(rng, 0, 2) == 0 ? A : B).push_back(i);
    if (A.empty()) A.push_back(B.back()), B.pop_back();
    const EntropyCurve ra = gaussian_entropy_curve(c, init, A, 30);
    const EntropyCurve rb = gaussian_entropy_curve(c, init, B, 30);
    expect_certified(ra);
    expect_certified(rb);
    for (std::size_t t = 0; t < ra.entropy.size(); ++t)
      EXPECT_TRUE(overlap(ra.entropy[t], ra.radius[t], rb.entropy[t], rb.radius[t]))
          << "trial " << trial << " t " << t << ": " << ra.entropy[t] << " vs " << rb.entropy[t];
    EXPECT_GT(ra.entropy[30], 1.0);  // entangled, so the check is not vacuous
    // The order of the region's sites does not matter (common practice).
    std::vector<std::int64_t> Ar(A.rbegin(), A.rend());
    const EntropyCurve rr = gaussian_entropy_curve(c, init, Ar, 30);
    for (std::size_t t = 0; t < ra.entropy.size(); ++t) EXPECT_EQ(rr.entropy[t], ra.entropy[t]);
  }
}

// --- degenerate symplectic spectra, light cone, reference charpoly -----------

TEST(GaussianExact, DegenerateModesFromIdenticalCopies) {
  // Bonds (0,1) and (2,3) carry the same cat gate, bond (1,2) the identity:
  // two identical decoupled copies. Region {0, 2} is a product of two
  // identical reduced states, so nu is doubly degenerate and
  // S_{0,2} = 2 S_{0} (additivity for product states; common practice).
  Circuit c;
  c.L = 4;
  c.boundary = Boundary::Open;
  c.bonds = {BondGate::position(m2(2, 1, 1, 1)), BondGate::position(Mat2::identity()),
             BondGate::position(m2(2, 1, 1, 1))};
  c.sites = {shear(1, 1), shear(1, 1), shear(1, 1), shear(1, 1)};
  const std::vector<GaussianSite> init = {squeezed(3, 2), GaussianSite{}, squeezed(3, 2), GaussianSite{}};
  EntropyOptions opt;
  opt.keep_spectrum = true;
  const EntropyCurve two = gaussian_entropy_curve(c, init, {0, 2}, 40, opt);
  const EntropyCurve one = gaussian_entropy_curve(c, init, {0}, 40, opt);
  expect_certified(two);
  expect_certified(one);
  for (std::size_t t = 1; t < two.entropy.size(); ++t) {
    EXPECT_TRUE(overlap(two.entropy[t], two.radius[t], 2 * one.entropy[t], 2 * one.radius[t])) << "t = " << t;
    EXPECT_EQ(two.nu[t][0], two.nu[t][1]) << "t = " << t;
    EXPECT_EQ(two.nu[t][0], one.nu[t][0]) << "t = " << t;
  }
  EXPECT_GT(one.entropy[40], 10.0);
}

TEST(GaussianExact, LightConeLimitsColumnsAndInfluence) {
  // A brick-wall period moves information by at most 2 sites each way, and
  // S_A(t) cannot depend on gates outside that light cone (causality of a
  // local circuit; common practice). Two open chains that differ only far
  // from A agree exactly until the cone reaches the difference.
  Circuit a;
  a.L = 40;
  a.boundary = Boundary::Open;
  a.bonds.assign(39, BondGate::position(m2(2, 1, 1, 1)));
  a.sites.assign(40, shear(1, 1));
  Circuit b = a;
  b.bonds[36] = BondGate::position(shear(1, -2));  // sites 36, 37
  b.sites[39] = shear(2, -1);
  const std::vector<std::int64_t> region = {18, 19, 20};
  const EntropyCurve ra = gaussian_entropy_curve(a, vacuum(40), region, 20);
  const EntropyCurve rb = gaussian_entropy_curve(b, vacuum(40), region, 20);
  for (std::int64_t t = 0; t <= 20; ++t) {
    // At most sites 18-2t .. 20+2t can be reached: 2 (3 + 4t) columns.
    EXPECT_LE(ra.columns[static_cast<std::size_t>(t)], 2 * std::min<std::int64_t>(40, 3 + 4 * t));
    // Bond (36,37) cannot be seen while the cone's edge 20 + 2t < 34 (t <= 6).
    if (t <= 6) {
      EXPECT_EQ(ra.entropy[static_cast<std::size_t>(t)], rb.entropy[static_cast<std::size_t>(t)]);
    }
  }
  // Once inside the cone the change does matter (certified difference).
  EXPECT_GT(std::fabs(ra.entropy[20] - rb.entropy[20]), ra.radius[20] + rb.radius[20]);
}

TEST(GaussianExact, FastPathMatchesFlintArbReference) {
  // The growth-bounded multi-modular characteristic polynomial and the
  // Newton-polygon-started root isolation against FLINT's fmpz_mat_charpoly
  // and arb_fmpz_poly_complex_roots (reference libraries: FLINT, arb): the
  // same exact polynomial, so the certified balls must overlap.
  std::mt19937_64 rng(42);
  for (int trial = 0; trial < 3; ++trial) {
    const Circuit c =
        random_circuit(10, Boundary::Periodic, trial == 0 ? Kind::Position : Kind::Symplectic, rng, 2);
    const std::vector<GaussianSite> init = random_state(10, rng);
    const std::vector<std::int64_t> region = {2, 3, 4, 7};
    EntropyOptions fast_opt, ref;
    fast_opt.keep_spectrum = ref.keep_spectrum = true;
    ref.reference = true;
    const EntropyCurve fast = gaussian_entropy_curve(c, init, region, 60, fast_opt);
    const EntropyCurve slow = gaussian_entropy_curve(c, init, region, 60, ref);
    // No room for residues of R: G by big-integer dot products instead of the
    // multi-modular lanes. Both are the same exact G, so everything after it
    // must agree to the bit.
    EntropyOptions dot_opt = fast_opt;
    dot_opt.residue_budget_bytes = 0;
    const EntropyCurve dot = gaussian_entropy_curve(c, init, region, 60, dot_opt);
    EXPECT_EQ(fast.entropy, dot.entropy);
    EXPECT_EQ(fast.radius, dot.radius);
    EXPECT_EQ(fast.charpoly_fallbacks, 0);  // the guard prime never disagreed
    EXPECT_EQ(dot.charpoly_fallbacks, 0);
    // arb's root isolation instead of the exact-sign proof: the same certified
    // values within the radii.
    EntropyOptions arb_opt = fast_opt;
    arb_opt.fast_roots = false;
    const EntropyCurve arbr = gaussian_entropy_curve(c, init, region, 60, arb_opt);
    for (std::size_t t = 0; t < fast.entropy.size(); ++t)
      EXPECT_TRUE(overlap(fast.entropy[t], fast.radius[t], arbr.entropy[t], arbr.radius[t])) << "t = " << t;
    expect_certified(fast);
    for (std::size_t t = 0; t < fast.entropy.size(); ++t) {
      EXPECT_TRUE(overlap(fast.entropy[t], fast.radius[t], slow.entropy[t], slow.radius[t])) << "t = " << t;
      EXPECT_EQ(fast.pure_modes[t], slow.pure_modes[t]) << "t = " << t;
      for (std::size_t j = 0; j < region.size(); ++j)
        EXPECT_TRUE(overlap(fast.nu[t][j], fast.nu_radius[t][j], slow.nu[t][j], slow.nu_radius[t][j]))
            << "t = " << t << " j = " << j;
    }
    EXPECT_GT(fast.bits[60], 60);  // beyond int64: the big-number path was used
  }
}

TEST(GaussianExact, WorkBytesModel) {
  // The memory model of `toral check` (gaussian_work_bytes) against what the
  // probe itself shows: R_t exactly needs at least rows x columns x bits / 8
  // bytes (common practice: an integer of b bits takes b / 8 bytes), the
  // model grows with T, the residue budget bounds the residues, and the
  // light cone never passes 2L columns. The measured peak is compared in
  // tests/cli/test_entanglement.py for the stabilizer rows.
  std::mt19937_64 rng(7);
  const std::int64_t L = 64;
  const Circuit c = random_circuit(L, Boundary::Open, Kind::Position, rng, 2);
  const std::vector<std::int64_t> region = {0, 1, 2, 3};
  const EntropyCurve cv = gaussian_entropy_curve(c, vacuum(L), region, 40);
  const EntropyOptions opt;
  const double at40 = gaussian_work_bytes(cv, 20, 40, 40, region.size(), L, opt);
  EXPECT_GE(at40, 8.0 * static_cast<double>(cv.columns[40]) * static_cast<double>(cv.bits[40]) / 8);
  const double at4000 = gaussian_work_bytes(cv, 20, 40, 4000, region.size(), L, opt);
  EXPECT_GT(at4000, at40);
  EntropyOptions small = opt;
  small.residue_budget_bytes = 0;
  const double no_residues = gaussian_work_bytes(cv, 20, 40, 4000, region.size(), L, small);
  EXPECT_LT(no_residues, at4000);
  // exact R at T = 4000 with at most 2L columns (the extrapolated bits times 2L),
  // plus the characteristic-polynomial lanes (under 16 MB for these few hundred nats)
  const double bits4000 = cv.bits[40] + (cv.bits[40] - cv.bits[20]) * (4000.0 - 40) / 20;
  EXPECT_LE(no_residues, 8.0 * 2 * L * (std::max(bits4000, 64.0) / 8 + 32) + 16e6);
  EXPECT_THROW(gaussian_work_bytes(cv, 40, 20, 4000, region.size(), L, opt), std::invalid_argument);
  EXPECT_THROW(gaussian_work_bytes(cv, 20, 41, 4000, region.size(), L, opt), std::invalid_argument);
}

// --- 6. Bad input ------------------------------------------------------------

TEST(GaussianExact, BadInputThrows) {
  const Circuit c = cat_pair(Boundary::Open);
  const auto v = vacuum(2);
  EXPECT_THROW(gaussian_entropy_curve(c, vacuum(3), {0}, 5), std::invalid_argument);  // size mismatch
  EXPECT_THROW(gaussian_entropy_curve(c, v, {2}, 5), std::invalid_argument);          // out of range
  EXPECT_THROW(gaussian_entropy_curve(c, v, {-1}, 5), std::invalid_argument);         // out of range
  EXPECT_THROW(gaussian_entropy_curve(c, v, {0, 0}, 5), std::invalid_argument);       // repeated
  EXPECT_THROW(gaussian_entropy_curve(c, v, {0}, -1), std::invalid_argument);         // T < 0
  EXPECT_THROW(gaussian_entropy_curve(c, {squeezed(0, 1), GaussianSite{}}, {0}, 5), std::invalid_argument);
  EXPECT_THROW(gaussian_entropy_curve(c, {squeezed(-1, 2), GaussianSite{}}, {0}, 5), std::invalid_argument);
  EXPECT_THROW(gaussian_entropy_curve(c, {squeezed(1, 0), GaussianSite{}}, {0}, 5), std::invalid_argument);
  EXPECT_THROW(gaussian_entropy_curve(c, {squeezed(3, -2), GaussianSite{}}, {0}, 5), std::invalid_argument);
  EntropyOptions bad;
  bad.target_radius = 0;
  EXPECT_THROW(gaussian_entropy_curve(c, v, {0}, 5, bad), std::invalid_argument);
  bad = EntropyOptions{};
  bad.max_prec_bits = 10;
  EXPECT_THROW(gaussian_entropy_curve(c, v, {0}, 5, bad), std::invalid_argument);
  // An invalid circuit is the model's error (odd periodic ring).
  Circuit odd;
  odd.L = 3;
  odd.bonds.assign(3, BondGate::position(Mat2::identity()));
  EXPECT_THROW(gaussian_entropy_curve(odd, vacuum(3), {0}, 5), ModelError);
  // s = -3/-2 = 3/2 > 0 is accepted and equals 3/2 (exact rationals).
  const EntropyCurve p = gaussian_entropy_curve(c, {squeezed(-3, -2), GaussianSite{}}, {0}, 5);
  const EntropyCurve q = gaussian_entropy_curve(c, {squeezed(3, 2), GaussianSite{}}, {0}, 5);
  EXPECT_EQ(p.entropy, q.entropy);
}
