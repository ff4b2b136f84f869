// The window peak rate of exact spreading profiles (kernels/spreading.hpp:
// peak_rate, profile_peak), used for the transient rate of open chains that
// are not clean (driver/transient.cpp).
//
// References: a worked example (m(t) = lambda t - ln(t)/2 + b, the saddle
// point's form, gives rate = lambda - ln 2 / T and error 2 ln 2 / T exactly);
// on clean chains the exact max_v lambda(v) of kernels/rays.hpp (itself
// checked against Python-integer propagation in tests/cli/test_rays.py); on
// disordered chains, where no exact value exists, a 4x longer window of the
// same chain, an independent and much longer computation.
#include <gtest/gtest.h>

#include <cmath>
#include <cstdint>
#include <vector>

#include "families.hpp"
#include "model.hpp"
#include "rays.hpp"
#include "spreading.hpp"
#include "test_gates.hpp"

namespace toral {
namespace {

using testgates::two_shear;

TEST(PeakRate, WorkedExampleOfTheSaddlePointForm) {
  const int T = 200;
  std::vector<double> m{0.0};
  for (int t = 1; t <= T; ++t) m.push_back(1.234 * t - 0.5 * std::log(t) + 0.3);
  const PeakRate r = peak_rate({m, m, m});
  EXPECT_EQ(r.periods, T);
  EXPECT_EQ(r.starts, 3);
  // [m(T) - m(T/2)] / (T/2) = lambda - ln 2 / T; over [T/4, T/2]: lambda - 2 ln 2 / T
  EXPECT_NEAR(r.rate, 1.234 - std::log(2.0) / T, 1e-12);
  EXPECT_NEAR(r.error, 2 * std::log(2.0) / T, 1e-12);
  EXPECT_EQ(r.spread, 0.0);
  EXPECT_GE(r.error, std::abs(r.rate - 1.234));
}

TEST(PeakRate, SpreadIsTheStandardErrorOverStarts) {
  const int T = 64;
  std::vector<std::vector<double>> m;
  for (double lam : {1.0, 1.2, 1.4, 1.6}) {
    std::vector<double> mj;
    for (int t = 0; t <= T; ++t) mj.push_back(lam * t);
    m.push_back(mj);
  }
  const PeakRate r = peak_rate(m);
  EXPECT_NEAR(r.rate, 1.3, 1e-12);
  // sample sd of {1.0, 1.2, 1.4, 1.6} is sqrt(0.2/3); over sqrt(4) (numpy.std(ddof=1)/2, by hand)
  EXPECT_NEAR(r.spread, std::sqrt(0.2 / 3) / 2, 1e-12);
  EXPECT_NEAR(r.error, r.spread, 1e-12);  // linear growth: no bias term
}

TEST(PeakRate, TooShortIsNaNAndBadInputThrows) {
  const PeakRate r = peak_rate({std::vector<double>(16, 1.0)});  // T = 15
  EXPECT_TRUE(std::isnan(r.rate) && std::isnan(r.error));
  EXPECT_THROW(peak_rate({}), InvalidInput);
  EXPECT_THROW(peak_rate({std::vector<double>(20, 0.0), std::vector<double>(21, 0.0)}), InvalidInput);
}

GateSource chain(std::int64_t L, const Mat2& A) {
  GateSource g;
  g.L = L;
  g.boundary = Boundary::Open;
  g.translation_invariant = true;
  g.bond = [A](std::int64_t, std::int64_t) { return BondGate::position(A); };
  return g;
}

TEST(PeakRate, CoversTheExactPeakOfCleanChains) {
  for (const Mat2& A : {two_shear(0, 4), testgates::m2(2, 1, 1, 1), two_shear(1, 2)}) {
    GateSource ring = chain(2, A);
    ring.boundary = Boundary::Periodic;
    const double exact = velocity_exponents(materialize(ring), false, {0.0}).peak;
    for (std::int64_t T : {32, 64, 128}) {
      const std::int64_t L = 4 * T + 4, c = L / 2;
      const PeakRate r = peak_rate({profile_peak(spread_profile(chain(L, A), c, false, T))});
      EXPECT_LE(std::abs(r.rate - exact), r.error) << "T = " << T << " exact " << exact << " got " << r.rate;
      EXPECT_LT(r.error, 3.0 / static_cast<double>(T));
    }
  }
}

TEST(PeakRate, DisorderedChainsShortWindowCoversTheLongOne) {
  // shear2(a = 0, b) with b drawn in 1..3 per bond: every eigenvalue exponent
  // of the open chain is 0 (unipotent, triangular), its perturbations grow.
  // Eight starts over T = 64 against one start over T = 256, per seed.
  int covered = 0;
  const int seeds = 8;
  for (int seed = 1; seed <= seeds; ++seed) {
    GateSource g;
    g.boundary = Boundary::Open;
    g.L = 8 * (4 * 64 + 4);
    g.bond = [seed](std::int64_t b, std::int64_t) {
      return BondGate::position(
          two_shear(0, draw_uniform(static_cast<std::uint64_t>(seed), 7, 0, static_cast<std::uint64_t>(b), 0, 1, 3)));
    };
    std::vector<std::vector<double>> m;
    for (int j = 0; j < 8; ++j) m.push_back(profile_peak(spread_profile(g, 130 + 260 * j, false, 64)));
    const PeakRate shrt = peak_rate(m);
    const PeakRate lng = peak_rate({profile_peak(spread_profile(g, g.L / 2, false, 256))});
    EXPECT_GT(shrt.spread, 0.0);
    EXPECT_GT(lng.rate, 1.0);
    if (std::abs(shrt.rate - lng.rate) <= shrt.error + lng.error) ++covered;
  }
  EXPECT_GE(covered, seeds - 1) << "the T = 64 error should cover the T = 256 estimate";
}

}  // namespace
}  // namespace toral
