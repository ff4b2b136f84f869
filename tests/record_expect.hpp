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
  ASSERT_EQ(a.fields.size(), b.fields.size()) << "fields";
  for (std::size_t k = 0; k < a.fields.size(); ++k) {
    const std::string at = "fields[" + std::to_string(k) + "]";
    EXPECT_EQ(a.fields[k].shape, b.fields[k].shape) << at;
    v(a.fields[k].f, b.fields[k].f, at.c_str());
    EXPECT_EQ(a.fields[k].i, b.fields[k].i) << at;
  }
}

}  // namespace toral_test
