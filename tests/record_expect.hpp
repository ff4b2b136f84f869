// Raw-bit, field-by-field equality of two PointRecords for the io and
// journal tests (doubles compared as bits, so NaN payloads and signed zeros
// count). Keep it in step with io/record.hpp.
#pragma once
#include <gtest/gtest.h>

#include <bit>
#include <cstdint>
#include <string>
#include <vector>

#include "record.hpp"

namespace toral_test {

inline std::uint64_t bits(double x) { return std::bit_cast<std::uint64_t>(x); }

inline void expect_identical_records(const toral::PointRecord& a, const toral::PointRecord& b, const std::string& where) {
  SCOPED_TRACE(where);
  auto d = [](double x, double y, const char* name) {
    EXPECT_EQ(bits(x), bits(y)) << name << ": " << x << " vs " << y;
  };
  auto v = [](const std::vector<double>& x, const std::vector<double>& y, const char* name) {
    ASSERT_EQ(x.size(), y.size()) << name;
    for (std::size_t i = 0; i < x.size(); ++i)
      EXPECT_EQ(bits(x[i]), bits(y[i])) << name << "[" << i << "]: " << x[i] << " vs " << y[i];
  };
  EXPECT_EQ(a.index, b.index);
  EXPECT_EQ(a.row, b.row);
  EXPECT_EQ(a.params, b.params);
  EXPECT_EQ(a.status, b.status);
  EXPECT_EQ(a.message, b.message);
  EXPECT_EQ(a.method, b.method);
  d(a.wall_time, b.wall_time, "wall_time");
  d(a.lambda_max, b.lambda_max, "lambda_max");
  d(a.ks_rate, b.ks_rate, "ks_rate");
  d(a.ks_density, b.ks_density, "ks_density");
  EXPECT_EQ(a.unstable_count, b.unstable_count);
  EXPECT_EQ(a.zero_count, b.zero_count);
  EXPECT_EQ(a.zero_certified, b.zero_certified);
  v(a.exponents, b.exponents, "exponents");
  v(a.exponent_errors, b.exponent_errors, "exponent_errors");
  d(a.pairing_defect, b.pairing_defect, "pairing_defect");
  d(a.sum_defect, b.sum_defect, "sum_defect");
  d(a.error_bound, b.error_bound, "error_bound");
  EXPECT_EQ(a.solver, b.solver);
  EXPECT_EQ(a.solver_converged, b.solver_converged);
  EXPECT_EQ(a.solver_iterations, b.solver_iterations);
  d(a.solver_residual, b.solver_residual, "solver_residual");
  d(a.solver_time, b.solver_time, "solver_time");
  EXPECT_EQ(a.solver_ranks, b.solver_ranks);
  EXPECT_EQ(a.cluster_count, b.cluster_count);
  d(a.cluster_spread, b.cluster_spread, "cluster_spread");
  v(a.hist_counts, b.hist_counts, "hist_counts");
  v(a.hist_edges, b.hist_edges, "hist_edges");
  d(a.limit_lambda_max, b.limit_lambda_max, "limit_lambda_max");
  d(a.limit_ks_density, b.limit_ks_density, "limit_ks_density");
  d(a.limit_accuracy, b.limit_accuracy, "limit_accuracy");
  v(a.limit_hist_counts, b.limit_hist_counts, "limit_hist_counts");
  v(a.limit_hist_edges, b.limit_hist_edges, "limit_hist_edges");
  EXPECT_EQ(a.cuts, b.cuts);
  v(a.lyapunov_rate, b.lyapunov_rate, "lyapunov_rate");
  v(a.hilbert_cap, b.hilbert_cap, "hilbert_cap");
  v(a.lightcone_rate, b.lightcone_rate, "lightcone_rate");
  v(a.ehrenfest_time, b.ehrenfest_time, "ehrenfest_time");
  v(a.saturation_lyapunov, b.saturation_lyapunov, "saturation_lyapunov");
  v(a.saturation_lightcone, b.saturation_lightcone, "saturation_lightcone");
  d(a.ent_wall_time, b.ent_wall_time, "ent_wall_time");
  EXPECT_EQ(a.ent_cuts, b.ent_cuts);
  v(a.ent_lyapunov_rate, b.ent_lyapunov_rate, "ent_lyapunov_rate");
  v(a.ent_region_rate, b.ent_region_rate, "ent_region_rate");
  v(a.gauss_entropy, b.gauss_entropy, "gauss_entropy");
  v(a.gauss_radius, b.gauss_radius, "gauss_radius");
  EXPECT_EQ(a.gauss_failures, b.gauss_failures);
  v(a.gauss_slope, b.gauss_slope, "gauss_slope");
  v(a.gauss_slope_over_lyapunov, b.gauss_slope_over_lyapunov, "gauss_slope_over_lyapunov");
  v(a.gauss_slope_over_region_rate, b.gauss_slope_over_region_rate, "gauss_slope_over_region_rate");
  v(a.gauss_saturation_value, b.gauss_saturation_value, "gauss_saturation_value");
  v(a.gauss_saturation_time, b.gauss_saturation_time, "gauss_saturation_time");
  v(a.stab_entropy, b.stab_entropy, "stab_entropy");
  v(a.stab_slope, b.stab_slope, "stab_slope");
  v(a.stab_slope_over_lyapunov, b.stab_slope_over_lyapunov, "stab_slope_over_lyapunov");
  v(a.stab_slope_over_lightcone, b.stab_slope_over_lightcone, "stab_slope_over_lightcone");
  v(a.stab_saturation_value, b.stab_saturation_value, "stab_saturation_value");
  v(a.stab_saturation_time, b.stab_saturation_time, "stab_saturation_time");
  v(a.stab_cap, b.stab_cap, "stab_cap");
  v(a.stab_lightcone_rate, b.stab_lightcone_rate, "stab_lightcone_rate");
  EXPECT_EQ(a.stab_violations, b.stab_violations);
  v(a.stab_profile, b.stab_profile, "stab_profile");
}

}  // namespace toral_test
