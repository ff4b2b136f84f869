// kernels/localisation: weights, IPR, participation number and the
// localisation length of a vector, on profiles whose values are known in
// closed form (sums of geometric series, common practice).
#include <gtest/gtest.h>

#include <cmath>

#include "errors.hpp"
#include "localisation.hpp"

using namespace toral;

TEST(Localisation, EqualWeightsGiveParticipationL) {
  const std::int64_t L = 10;
  std::vector<double> v(2 * L, 0.0);
  for (std::int64_t i = 0; i < L; ++i) v[static_cast<std::size_t>(i)] = (i % 2 ? -3.0 : 3.0);
  const Localisation loc = localisation(v, L, true);
  EXPECT_NEAR(loc.ipr, 1.0 / L, 1e-15);
  EXPECT_NEAR(loc.participation, 10.0, 1e-13);
  EXPECT_EQ(loc.peak, 0);
  EXPECT_TRUE(std::isinf(loc.xi));  // flat: slope 0, not localised
}

TEST(Localisation, OneSiteAndMomentumPart) {
  const std::int64_t L = 6;
  std::vector<double> v(2 * L, 0.0);
  v[L + 4] = -2.0;  // p_4 only
  const Localisation loc = localisation(v, L, false);
  EXPECT_EQ(loc.peak, 4);
  EXPECT_DOUBLE_EQ(loc.ipr, 1.0);
  EXPECT_DOUBLE_EQ(loc.weight[4], 1.0);
  EXPECT_TRUE(std::isnan(loc.xi));  // one site above the floor: no fit
}

TEST(Localisation, ExponentialProfileGivesXiExactly) {
  // |v_i| = exp(-|i - 20| / xi) split over q and p: ln w_i is exactly linear
  // in the distance, so the fit returns xi with zero residual; the IPR is the
  // ratio of the geometric sums sum r^(2d) / (sum r^d)^2, r = exp(-2 / xi).
  const std::int64_t L = 41;
  const double xi = 3.5;
  std::vector<double> v(2 * L, 0.0);
  for (std::int64_t i = 0; i < L; ++i) {
    const double a = std::exp(-std::abs(static_cast<double>(i - 20)) / xi);
    v[static_cast<std::size_t>(i)] = a * 0.6;
    v[static_cast<std::size_t>(L + i)] = a * 0.8;
  }
  const Localisation loc = localisation(v, L, false);
  EXPECT_EQ(loc.peak, 20);
  EXPECT_NEAR(loc.xi, xi, 1e-10);
  EXPECT_LT(loc.xi_error, 1e-8);
  double s1 = 0, s2 = 0;
  for (std::int64_t i = 0; i < L; ++i) {
    const double w = std::exp(-2.0 * std::abs(static_cast<double>(i - 20)) / xi);
    s1 += w;
    s2 += w * w;
  }
  EXPECT_NEAR(loc.ipr, s2 / (s1 * s1), 1e-14);
  EXPECT_EQ(loc.fitted, L);
}

TEST(Localisation, RingDistanceWrapsAround) {
  // Peak at site 1 of a ring of 30: site 29 is 2 away, not 28.
  const std::int64_t L = 30;
  const double xi = 2.0;
  std::vector<double> v(2 * L, 0.0);
  for (std::int64_t i = 0; i < L; ++i) {
    std::int64_t d = std::abs(i - 1);
    d = std::min(d, L - d);
    v[static_cast<std::size_t>(i)] = std::exp(-static_cast<double>(d) / xi);
  }
  const Localisation loc = localisation(v, L, true);
  EXPECT_NEAR(loc.xi, xi, 1e-9);
  const Localisation open = localisation(v, L, false);
  EXPECT_GT(open.xi_error, 0.1);  // read as an open chain the profile is not one exponential
}

TEST(Localisation, BadInput) {
  EXPECT_THROW(localisation(std::vector<double>(5, 1.0), 3, true), InvalidInput);
  EXPECT_THROW(localisation(std::vector<double>(6, 0.0), 3, true), InvalidInput);
}
