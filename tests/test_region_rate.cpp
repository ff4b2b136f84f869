// kernels/region_rate: the exact log-volume ln vol(P_A S^t) of a region's
// rows of S^t and its late-time rate, checked against the certified Gaussian
// entropies of kernels/gaussian_exact (an independent route: exact
// characteristic polynomials and certified roots, not a Gram determinant).
//
// The identity behind every check (kernels/region_rate.hpp): for the vacuum,
// sigma_A(t) = (1/2) R_t R_t^T with R_t = P_A S^t, and Williamson's theorem
// gives det sigma_A = prod_j nu_j^2 over the |A| symplectic eigenvalues, so
//   ln vol(R_t) = |A| ln 2 + sum_j ln nu_j(t)                         (1)
// and, with g(nu) = f(nu) - ln nu increasing from ln 2 (nu = 1/2) to 1,
//   ln vol(R_t) <= S_A(t) <= ln vol(R_t) + |A| (1 - ln 2).             (2)
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <limits>
#include <numeric>
#include <stdexcept>

#include "bounds.hpp"
#include "families.hpp"
#include "gaussian_exact.hpp"
#include "region_rate.hpp"
#include "spectrum.hpp"
#include "test_gates.hpp"

using namespace toral;
using namespace toral::testgates;

namespace {

// A translation-invariant ring of L sites: bond gate `bond` (position class)
// on every bond, and the one-site gate `kick` on every site when given.
Circuit ring(std::int64_t L, const Mat2& bond, const Mat2* kick = nullptr) {
  Circuit c;
  c.L = L;
  c.boundary = Boundary::Periodic;
  c.bonds.assign(static_cast<std::size_t>(L), BondGate::position(bond));
  if (kick) c.sites.assign(static_cast<std::size_t>(L), *kick);
  return c;
}

// The ring of the reflection-symmetric coupling q_a += p_b, q_b += p_a
// (examples/symplectic_gates.toml) with the one-site cat kick cat(a, 1).
Circuit coupled_ring(std::int64_t L, std::int64_t a) {
  Mat4 G = Mat4::identity();
  G(0, 3) = 1;  // q_a += p_b
  G(2, 1) = 1;  // q_b += p_a
  Circuit c;
  c.L = L;
  c.boundary = Boundary::Periodic;
  c.bonds.assign(static_cast<std::size_t>(L), BondGate::symplectic(G));
  c.sites.assign(static_cast<std::size_t>(L), family_matrix("cat", {a, 1}));
  return c;
}

// 1 - g(nu) = 1 + ln nu - f(nu) >= 0, f the mode entropy (for huge nu its
// expansion 1/(24 nu^2), common practice; doubles overflow there).
double one_minus_g(double nu) {
  if (nu > 1e6) return 1.0 / (24.0 * nu * nu);
  const double f = (nu + 0.5) * std::log(nu + 0.5) - (nu > 0.5 ? (nu - 0.5) * std::log(nu - 0.5) : 0.0);
  return std::max(0.0, 1.0 + std::log(nu) - f);
}

// The largest |least-squares slope| of a sequence whose values stay in an
// interval of width 1, over the late window of n points: the slope is
// sum (t - tbar) y_t / sum (t - tbar)^2, largest for y = 1 where t > tbar.
double slope_per_width(std::size_t n) {
  const std::size_t t0 = late_window_start(n), T = n - 1;
  const double tbar = 0.5 * static_cast<double>(t0 + T);
  double up = 0, den = 0;
  for (std::size_t t = t0; t <= T; ++t) {
    const double d = static_cast<double>(t) - tbar;
    den += d * d;
    if (d > 0) up += d;
  }
  return up / den;
}

struct Compared {
  RegionRate rr;
  EntropyCurve cv;
  double slope_tolerance = 0;  // rigorous bound on |gaussian slope - region rate|
};

// The region rate and the vacuum Gaussian curve (with its nu's) of one
// region, with identities (1) and (2) checked at every t, and the rigorous
// tolerance of the slopes: by (1), S_A - ln vol = |A|(1 - ln 2) - sum_j
// (1 - g(nu_j)), so over the window it varies by at most
// delta = max_t sum_j (1 - g(nu_j(t))), and the slopes differ by at most
// delta * slope_per_width plus the certified radii's share.
Compared compare(const Circuit& c, const std::vector<std::int64_t>& region, std::int64_t T) {
  Compared out;
  out.rr = region_rate(c, region, T);
  EntropyOptions o;
  o.keep_spectrum = true;
  out.cv = gaussian_entropy_curve(c, std::vector<GaussianSite>(static_cast<std::size_t>(c.L)), region, T, o);
  const double k = static_cast<double>(region.size());
  const std::size_t n = static_cast<std::size_t>(T) + 1, t0 = late_window_start(n);
  double delta = 0, radii = 0;
  for (std::size_t t = 0; t < n; ++t) {
    const double lv = out.rr.log_volume[t], rv = out.rr.radius[t];
    double sum_ln = k * std::log(2.0), sum_ln_rad = 0, gap = 0;
    bool finite = true;  // the nu's are doubles: past ~1e308 they read inf
    for (std::size_t j = 0; j < out.cv.nu[t].size(); ++j) {
      const double nu = out.cv.nu[t][j];
      finite = finite && std::isfinite(nu);
      sum_ln += std::log(nu);
      sum_ln_rad += out.cv.nu_radius[t][j] / (nu - out.cv.nu_radius[t][j]);
      gap += one_minus_g(nu);
    }
    // (1), within the radii and the rounding of the sums
    if (finite) {
      EXPECT_NEAR(lv, sum_ln, rv + sum_ln_rad + 1e-12 * std::max(1.0, std::fabs(lv))) << "t = " << t;
    }
    // (2)
    const double S = out.cv.entropy[t], rs = out.cv.radius[t] + rv + 1e-12 * std::max(1.0, S);
    EXPECT_GE(S, lv - rs) << "t = " << t;
    EXPECT_LE(S, lv + k * (1 - std::log(2.0)) + rs) << "t = " << t;
    if (t >= t0) {
      delta = std::max(delta, gap);
      radii = std::max(radii, out.cv.radius[t] + rv);
    }
  }
  out.slope_tolerance = (delta + 2 * radii) * slope_per_width(n) + 1e-12 * std::fabs(out.rr.rate);
  return out;
}

double lambda(const Circuit& c, std::int64_t ell) { return lyapunov_rate(dense_spectrum(c).exponents, c.L, ell); }

}  // namespace

TEST(RegionRate, LateSlopeWindow) {
  // Least squares reproduces a straight line (common practice).
  std::vector<double> y;
  for (int t = 0; t <= 8; ++t) y.push_back(3.0 * t - 1.0);
  EXPECT_NEAR(late_slope(y.data(), y.size()), 3.0, 1e-14);
  // The window is t0 = min(ceil(3T/4), T - 1) .. T (docs/entanglement.md):
  // T = 8 -> 6, T = 4 -> 3, T = 1 -> 0; y = t^2 on T = 4 uses t = 3, 4.
  EXPECT_EQ(late_window_start(9), 6u);
  EXPECT_EQ(late_window_start(5), 3u);
  EXPECT_EQ(late_window_start(2), 0u);
  const std::vector<double> sq = {0, 1, 4, 9, 16};
  EXPECT_NEAR(late_slope(sq.data(), sq.size()), 7.0, 1e-12);
  // Values before the window do not matter, a NaN inside it does.
  const double nan = std::numeric_limits<double>::quiet_NaN();
  std::vector<double> w = {nan, nan, nan, 9, 16};
  EXPECT_NEAR(late_slope(w.data(), w.size()), 7.0, 1e-12);
  w[4] = nan;
  EXPECT_TRUE(std::isnan(late_slope(w.data(), w.size())));
  EXPECT_TRUE(std::isnan(late_slope(sq.data(), 1)));
  EXPECT_THROW(late_window_start(1), std::invalid_argument);
}

TEST(RegionRate, LogVolumeIsTheGaussianDeterminant) {
  // Identities (1) and (2) at every t, for blocks, split regions, a region
  // larger than half the ring (the kernel takes its complement), open chains
  // and symplectic gates: the exact log-volume against the certified nu's.
  const Mat2 kick = family_matrix("cat", {3, 1});
  const Circuit cases[] = {ring(8, two_shear(1, 1)), ring(10, two_shear(1, 2), &kick), coupled_ring(8, 3)};
  for (const Circuit& c : cases)
    for (const std::vector<std::int64_t>& A : {std::vector<std::int64_t>{0}, {0, 1, 2}, {1, 4}, {0, 1, 4, 5},
                                              {0, 1, 2, 3, 4, 5}}) {
      SCOPED_TRACE("L = " + std::to_string(c.L) + ", |A| = " + std::to_string(A.size()));
      const Compared r = compare(c, A, 24);
      const auto k = static_cast<std::int64_t>(A.size());
      EXPECT_EQ(r.rr.sites, std::min(k, c.L - k));
      EXPECT_EQ(r.rr.complement, 2 * k > c.L);
      EXPECT_EQ(r.rr.log_volume[0], 0.0);  // P_A itself: orthonormal rows
      EXPECT_NEAR(r.rr.rate, late_slope(r.cv.entropy.data(), r.cv.entropy.size()), r.slope_tolerance);
    }
  // an open chain with a general symplectic bond gate
  Circuit open;
  open.L = 7;
  open.boundary = Boundary::Open;
  const Mat4 g = checked_matmul(elementary_shear4(2, 1), checked_matmul(elementary_shear4(1, 2), coupling()));
  open.bonds.assign(6, BondGate::symplectic(g));
  for (const std::vector<std::int64_t>& A : {std::vector<std::int64_t>{3}, {0, 1}, {2, 3, 5}})
    (void)compare(open, A, 20);
}

TEST(RegionRate, ComplementHasTheSameVolume) {
  // vol(P_A S^t) = vol(P_{A^c} S^t) for symplectic S^t: the global state is
  // pure, S_A = S_{A^c} (and the nu's of A and A^c agree apart from 1/2's).
  // Half-ring regions are computed as given, so both sides are really formed.
  const Circuit c = ring(8, two_shear(1, 2));
  const RegionRate a = region_rate(c, {0, 1, 4, 5}, 30), b = region_rate(c, {2, 3, 6, 7}, 30);
  EXPECT_FALSE(a.complement);
  EXPECT_FALSE(b.complement);
  for (std::size_t t = 0; t < a.log_volume.size(); ++t)
    EXPECT_NEAR(a.log_volume[t], b.log_volume[t], a.radius[t] + b.radius[t] + 1e-13 * a.log_volume[t]) << t;
  // A region larger than half is replaced by its complement: the same curve.
  const RegionRate big = region_rate(c, {0, 1, 2, 4, 5, 6}, 30), small = region_rate(c, {3, 7}, 30);
  EXPECT_TRUE(big.complement);
  EXPECT_EQ(big.sites, 2);
  EXPECT_EQ(big.log_volume, small.log_volume);
}

TEST(RegionRate, WholeLatticeAndBadInput) {
  const Circuit c = ring(4, two_shear(1, 1));
  for (const std::vector<std::int64_t>& A : {std::vector<std::int64_t>{}, {0, 1, 2, 3}}) {
    const RegionRate r = region_rate(c, A, 5);  // Lambda_|A| is undefined there too
    EXPECT_TRUE(std::isnan(r.rate));
    ASSERT_EQ(r.log_volume.size(), 6u);
    for (double x : r.log_volume) EXPECT_TRUE(std::isnan(x));
  }
  EXPECT_TRUE(std::isnan(region_rate(c, {0}, 0).rate));  // T = 0: no slope
  EXPECT_THROW(region_rate(c, {0}, -1), std::invalid_argument);
  EXPECT_THROW(region_rate(c, {0, 0}, 3), std::invalid_argument);
  EXPECT_THROW(region_rate(c, {4}, 3), std::invalid_argument);
  RegionRateOptions o;
  o.from_t = -2;
  EXPECT_THROW(region_rate(c, {0}, 3, o), std::invalid_argument);
  // from_t: NaN before it, the same values from it on (within the certified
  // radii: the working precision may differ), the same rate
  o.from_t = 6;
  const RegionRate full = region_rate(c, {0, 1}, 8), part = region_rate(c, {0, 1}, 8, o);
  for (std::size_t t = 0; t <= 8; ++t) {
    if (t < 6) {
      EXPECT_TRUE(std::isnan(part.log_volume[t]));
    } else {
      EXPECT_NEAR(part.log_volume[t], full.log_volume[t], part.radius[t] + full.radius[t]);
    }
  }
  EXPECT_NEAR(part.rate, full.rate, 1e-12 * full.rate);
  Circuit bad = c;
  bad.bonds[1] = BondGate::position(m2(2, 0, 0, 2));  // det 4
  EXPECT_THROW(region_rate(bad, {0}, 3), ModelError);
}

TEST(RegionRate, SymmetricRegionMissesTheGenericRate) {
  // The region {0, 4} of an 8-site ring is invariant under the translation by
  // four sites (two brick-wall cells), which commutes with S; its rows then
  // see the Bloch momenta k with e^{4ik} = 1 and e^{4ik} = -1 separately, and
  // here the top of the spectrum is not split evenly between them. The exact
  // rate (Gaussian slope: the certified curve, an independent kernel) is well
  // below Lambda_2 (the sum of the 4 largest exponents, dense LAPACK
  // spectrum). A floating-point QR of the same rows gives Lambda_2 instead
  // (rounding breaks the symmetry; bench/region_rate.py,
  // docs/performance_region_rate.md), which is why the kernel is exact.
  const Circuit c = coupled_ring(8, 3);
  const Compared r = compare(c, {0, 4}, 100);
  const double gauss = late_slope(r.cv.entropy.data(), r.cv.entropy.size());
  EXPECT_NEAR(r.rr.rate, gauss, r.slope_tolerance);
  const double lam = lambda(c, 2);
  EXPECT_LT(r.rr.rate, 0.8 * lam);
  EXPECT_GT(r.rr.rate, 0.6 * lam);
}

TEST(RegionRate, CleanRingBlockMatchesTheGaussianSlope) {
  // A block of 8 sites in a clean ring of L = 64 (shear2 a = b = 1, i.e. the
  // cat map [[2, 1], [1, 1]] on every bond), T = 240: the region rate against
  // the certified Gaussian slope, within the rigorous tolerance from (1)
  // (every nu_j grows, so it is tiny), and against Lambda_8 (dense LAPACK
  // spectrum): the block approaches the generic rate from below here.
  const Circuit c = ring(64, two_shear(1, 1));
  const Compared r = compare(c, {0, 1, 2, 3, 4, 5, 6, 7}, 240);
  const double gauss = late_slope(r.cv.entropy.data(), r.cv.entropy.size());
  EXPECT_LT(r.slope_tolerance, 1e-9);
  EXPECT_NEAR(r.rr.rate, gauss, r.slope_tolerance);
  const double lam = lambda(c, 8);
  EXPECT_LT(r.rr.rate, lam);
  EXPECT_GT(r.rr.rate, 0.999 * lam);
}
