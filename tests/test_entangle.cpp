// The per-point pieces of driver/entangle.cpp: cut counting, the late-time
// slope and saturation, bound violations, and one point end to end.
#include <gtest/gtest.h>

#include <mpi.h>

#include <cmath>
#include <string>

#include "compute.hpp"
#include "config.hpp"
#include "entangle.hpp"
#include "sweep.hpp"

using namespace toral;

namespace {
// compute_point takes an MPI communicator (MPI_COMM_SELF here): MPI must be up.
class MpiEnvironment : public ::testing::Environment {
 public:
  void SetUp() override {
    int up = 0;
    MPI_Initialized(&up);
    if (!up) MPI_Init(nullptr, nullptr);
  }
  void TearDown() override {
    int done = 0;
    MPI_Finalized(&done);
    if (!done) MPI_Finalize();
  }
};
[[maybe_unused]] ::testing::Environment* const g_mpi = ::testing::AddGlobalTestEnvironment(new MpiEnvironment);
}  // namespace

TEST(Entangle, BoundaryCuts) {
  // Counted by hand from the bond definition (kernels/model.hpp: bond b joins
  // b and b + 1 mod L; L bonds on a ring, L - 1 on an open chain).
  EXPECT_EQ(boundary_cuts({0, 1, 2}, 8, Boundary::Periodic), 2);
  EXPECT_EQ(boundary_cuts({0, 1, 2}, 8, Boundary::Open), 1);    // the chain's end is no cut
  EXPECT_EQ(boundary_cuts({2, 3}, 8, Boundary::Open), 2);
  EXPECT_EQ(boundary_cuts({0, 7}, 8, Boundary::Periodic), 2);   // an arc across the wrap
  EXPECT_EQ(boundary_cuts({0, 7}, 8, Boundary::Open), 2);
  EXPECT_EQ(boundary_cuts({0, 2, 4, 6}, 8, Boundary::Periodic), 8);
  EXPECT_EQ(boundary_cuts({0, 1, 2, 3}, 4, Boundary::Periodic), 0);  // the whole lattice
  EXPECT_EQ(boundary_cuts({0}, 2, Boundary::Periodic), 2);      // L = 2 ring: bonds (0,1) and (1,0)
  EXPECT_EQ(boundary_cuts({0}, 2, Boundary::Open), 1);
}

TEST(Entangle, SlopeAndSaturation) {
  // Least squares reproduces a straight line exactly (common practice).
  std::vector<double> line;
  for (int t = 0; t <= 8; ++t) line.push_back(2.0 * t + 1.0);
  CurveSummary s = summarize_curve(line.data(), line.size());
  EXPECT_NEAR(s.slope, 2.0, 1e-14);
  EXPECT_EQ(s.saturation_value, 17.0);
  EXPECT_EQ(s.saturation_time, 8.0);  // 0.99 * 17 = 16.83 is first reached at t = 8
  // The window is t = ceil(3T/4) .. T: for S = t^2, T = 4 that is t = 3, 4 (slope 16 - 9).
  const std::vector<double> sq = {0, 1, 4, 9, 16};
  EXPECT_NEAR(summarize_curve(sq.data(), sq.size()).slope, 7.0, 1e-12);
  // T = 1 uses t = 0, 1; T = 0 has no slope.
  const std::vector<double> two = {0.5, 2.0};
  EXPECT_NEAR(summarize_curve(two.data(), 2).slope, 1.5, 1e-15);
  const double one = 3.0;
  s = summarize_curve(&one, 1);
  EXPECT_TRUE(std::isnan(s.slope));
  EXPECT_EQ(s.saturation_time, 0.0);
  // A plateau: min(t, 4) for t = 0..12 has slope 0 late, saturates at t = 4.
  std::vector<double> pl;
  for (int t = 0; t <= 12; ++t) pl.push_back(std::min(t, 4));
  s = summarize_curve(pl.data(), pl.size());
  EXPECT_EQ(s.slope, 0.0);
  EXPECT_EQ(s.saturation_value, 4.0);
  EXPECT_EQ(s.saturation_time, 4.0);
}

TEST(Entangle, BoundViolations) {
  // By hand: S = {0, 1, 3} against cap 2.5 and rate 1.2: only t = 2 (3 > 2.5, 3 > 2.4).
  const std::vector<double> S = {0, 1, 3};
  EXPECT_EQ(bound_violations(S.data(), 3, 2.5, 1.2), 1);
  EXPECT_EQ(bound_violations(S.data(), 3, 3.0, 1.5), 0);
  EXPECT_EQ(bound_violations(S.data(), 3, 3.0, 1.0), 1);   // 3 - 0 > 1 * 2
  EXPECT_EQ(bound_violations(S.data(), 3, 3.0 - 1e-10, 1.5), 0);  // within the 1e-9 tolerance
}

TEST(Entangle, CatChainEndToEnd) {
  // The open two-site cat chain: one period is the cat map A = [[2,1],[1,1]] on
  // (q0, q1) and A^-T on the momenta, so every exponent is +-ln((3+sqrt5)/2)
  // (Arnold's cat map); a one-site region of the vacuum grows at
  // Lambda_1 = 2 ln((3+sqrt5)/2) (Bianchi, Hackl & Yokomizo, JHEP 03 (2018) 025).
  const Config c = parse_config(R"([[sweep]]
sites = 2
boundary = "open"
[sweep.bond]
matrix = [[2,1],[1,1]]
[entanglement]
periods = 40
regions = [1, [0, 1], [1]]
stabilizer_dims = [2, 3]
profile = true
profile_stride = 8
)",
                                "t.toml");
  const ParamTable t = param_table(c);
  const Point p = expand(c).at(0);
  const PointRecord r = compute_point(c, t, p);
  ASSERT_EQ(r.status, 0) << r.message;
  const double rate = 2.0 * std::log((3.0 + std::sqrt(5.0)) / 2.0);
  ASSERT_EQ(r.gauss_slope.size(), 3u);
  EXPECT_NEAR(r.gauss_slope[0], rate, 1e-9);
  EXPECT_NEAR(r.gauss_slope_over_lyapunov[0], 1.0, 1e-9);
  EXPECT_NEAR(r.ent_lyapunov_rate[0], rate, 1e-12);
  // the other site gives the same entropy (pure global state), the whole chain 0
  for (std::size_t i = 0; i <= 40; ++i) {
    EXPECT_NEAR(r.gauss_entropy[2 * 41 + i], r.gauss_entropy[i], 1e-9) << i;
    EXPECT_NEAR(r.gauss_entropy[41 + i], 0.0, 1e-12) << i;
    EXPECT_LE(r.gauss_radius[i], 1e-12) << i;
  }
  EXPECT_EQ(r.gauss_failures, (std::vector<std::int64_t>{0, 0, 0}));
  EXPECT_EQ(r.ent_cuts, (std::vector<std::int64_t>{1, 0, 1}));
  // position states under a position-class circuit stay |0> (common practice)
  for (double x : r.stab_entropy) EXPECT_EQ(x, 0.0);
  for (double x : r.stab_profile) EXPECT_EQ(x, 0.0);
  EXPECT_EQ(r.stab_profile.size(), 2u * 6u * 3u);  // N x (40/8 + 1) x (L + 1)
  EXPECT_EQ(r.stab_violations, (std::vector<std::int64_t>(6, 0)));
  EXPECT_NEAR(r.stab_cap[0], std::log(2.0), 1e-15);   // min(1, 1) ln 2
  EXPECT_EQ(r.stab_cap[1], 0.0);                      // the whole chain
  EXPECT_NEAR(r.stab_lightcone_rate[3], 2.0 * std::log(3.0), 1e-15);  // 2 c ln N, c = 1
  EXPECT_GE(r.ent_wall_time, 0.0);
}

TEST(Entangle, RegionsThatDoNotFitAndRedrawnGatesAreNaN) {
  const Config c = parse_config(R"([[sweep]]
sites = [4, 8]
seeds = [1]
disorder = "redrawn"
[sweep.bond]
family = "shear2"
a = { draw = [-1, 1] }
b = 1
[[sweep]]
name = "frozen"
sites = [4, 8]
[sweep.bond]
family = "shear2"
a = 1
b = 1
[entanglement]
periods = 4
regions = [[5, 6], 2]
stabilizer_dims = [5]
)",
                                "t.toml");
  const ParamTable t = param_table(c);
  const auto pts = expand(c);
  ASSERT_EQ(pts.size(), 4u);
  for (const auto& p : pts) {
    const PointRecord r = compute_point(c, t, p);
    SCOPED_TRACE(p.index);
    ASSERT_EQ(r.gauss_entropy.size(), 2u * 5u);
    ASSERT_EQ(r.stab_entropy.size(), 2u * 5u);
    const bool fits = p.L >= 7;
    if (p.sweep == 0) {  // redrawn every period: no curve, but the cuts (Lambda from tangent exponents: test_large.py)
      for (double x : r.gauss_entropy) EXPECT_TRUE(std::isnan(x));
      for (double x : r.stab_entropy) EXPECT_TRUE(std::isnan(x));
      EXPECT_EQ(r.ent_cuts, (std::vector<std::int64_t>{fits ? 2 : -1, 2}));
      continue;
    }
    EXPECT_EQ(r.status, 0) << r.message;
    EXPECT_EQ(std::isnan(r.gauss_entropy[0]), !fits);
    EXPECT_EQ(std::isnan(r.stab_entropy[0]), !fits);
    EXPECT_EQ(r.ent_cuts[0], fits ? 2 : -1);
    EXPECT_EQ(r.stab_violations[0], fits ? 0 : -1);
    EXPECT_FALSE(std::isnan(r.gauss_entropy[5]));  // the block {0, 1} fits both
    EXPECT_EQ(r.ent_cuts[1], 2);
  }
}

TEST(Entangle, MissedRadiusTargetMakesTheStatusEntanglementFailed) {
  // A radius no 64-bit root precision can certify (S_A(t) is hundreds of nats):
  // the curve is kept with its larger radii, the misses are counted, and the
  // ok point becomes status 7 with a message naming the region and the target.
  const std::string cat = R"([[sweep]]
sites = 2
boundary = "open"
[sweep.bond]
matrix = [[2, 1], [1, 1]]
[entanglement]
periods = 30
regions = [1]
)";
  const Config c = parse_config(cat + "radius = 1e-200\nmax_precision_bits = 64\n", "t.toml");
  ASSERT_EQ(c.entanglement.radius, 1e-200);
  const PointRecord r = compute_point(c, param_table(c), expand(c).at(0));
  EXPECT_EQ(r.status, 7) << r.message;  // entanglement_failed (io/record.hpp)
  EXPECT_NE(r.message.find("gaussian region 0"), std::string::npos) << r.message;
  EXPECT_NE(r.message.find("1e-200"), std::string::npos) << r.message;
  ASSERT_EQ(r.gauss_failures.size(), 1u);
  EXPECT_GT(r.gauss_failures[0], 0);
  // the midpoints are still the curve: the cat slope 2 ln((3 + sqrt 5)/2)
  // (Bianchi, Hackl & Yokomizo, JHEP 03 (2018) 025) within the larger radii
  EXPECT_NEAR(r.gauss_entropy[30] - r.gauss_entropy[29], 1.9248473002384139, 1e-6);
  EXPECT_TRUE(std::isfinite(r.lambda_max));  // the spectrum part is untouched
  // the same point with the default target certifies every t
  const Config ok = parse_config(cat, "t.toml");
  const PointRecord q = compute_point(ok, param_table(ok), expand(ok).at(0));
  EXPECT_EQ(q.status, 0) << q.message;
  EXPECT_EQ(q.gauss_failures[0], 0);
  for (double x : q.gauss_radius) EXPECT_LE(x, 1e-12);
}

TEST(Entangle, FailedSpectrumKeepsItsStatusAndTheCurvesAreComputed) {
  // dense forced beyond dense_max: status no_method (4) for the spectrum,
  // while the curves of the (valid) circuit are computed and Lambda is NaN.
  const Config c = parse_config(R"([[sweep]]
sites = 6
[sweep.bond]
family = "shear2"
a = 1
b = 1
[spectrum]
method = "dense"
dense_max = 4
[entanglement]
periods = 8
regions = [2]
stabilizer_dims = [3]
)",
                                "t.toml");
  const PointRecord r = compute_point(c, param_table(c), expand(c).at(0));
  EXPECT_EQ(r.status, 4) << r.message;
  for (double x : r.gauss_entropy) EXPECT_TRUE(std::isfinite(x));
  for (double x : r.stab_entropy) EXPECT_TRUE(std::isfinite(x));
  EXPECT_GT(r.gauss_entropy[8], 0.0);
  EXPECT_TRUE(std::isnan(r.ent_lyapunov_rate[0]));
  EXPECT_TRUE(std::isnan(r.gauss_slope_over_lyapunov[0]));
}
