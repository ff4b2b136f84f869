// Coverage of the tangent (QR) method's error estimate (solvers/tangent.hpp,
// docs/model.md "Accuracy of the tangent method"): frozen circuits, each
// point compared with dense LAPACK dgeevx on the same matrix. The circuits
// come from a config through the driver's own gate sources (the same draws
// as `toral run`), and tangent_top runs with the config's [spectrum.tangent]
// values, as driver/compute.cpp calls it.
//
// An exponent is compared where the reference can tell it from 0: |d| above
// max(1e-9, its dgeevx error bound) (the rule docs/model.md uses for a
// positive exponent). The others are eigenvalues on the unit circle, in
// these shear circuits often in Jordan blocks, where LAPACK is accurate only
// to about eps^(1/m) (m the block size; the bound says so, LAPACK Users'
// Guide section 4.8) and dense is no reference for a 1e-4 tangent error.
// Outside means |t - d| > 2 err_t + err_d (the reference's own bound added).
#include <gtest/gtest.h>
#include <mpi.h>
#include <slepcsys.h>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <string>
#include <vector>

#include "config.hpp"
#include "spectrum.hpp"
#include "sweep.hpp"
#include "tangent.hpp"

namespace toral {
namespace {

struct Count {
  int points = 0;
  int compared = 0;
  int outside_new = 0;  // |t - d| > 2 err + err_d, err = TangentResult::errors
  int outside_old = 0;  // the same with the window standard error alone (before issue 9)
  int outside_old_1e12 = 0;  // ... even with 1e-12 added (the old tests' rounding allowance)
};

// Every point of `text` with the tangent method and with dense LAPACK.
// `all`: compare every exponent (the reference's bound is in the tolerance).
Count coverage(const std::string& text, bool all) {
  const Config c = parse_config(text, "coverage.toml");
  Count n;
  for (const Point& p : expand(c)) {
    const Spectrum ref = dense_spectrum(build_circuit(c, p));
    TangentOptions o;
    o.k = static_cast<int>(2 * p.L);  // all exponents
    o.periods = c.spectrum.tangent.periods;
    o.transient = c.spectrum.tangent.transient;
    o.windows = static_cast<int>(c.spectrum.tangent.windows);
    o.seed = static_cast<std::uint64_t>(p.seed);
    const TangentResult r = tangent_top(MPI_COMM_WORLD, gate_source(c, p), o);
    EXPECT_TRUE(r.ok) << r.message;
    if (!r.ok) continue;
    EXPECT_EQ(r.exponents.size(), ref.exponents.size());
    EXPECT_EQ(ref.errors.size(), ref.exponents.size());
    if (r.exponents.size() != ref.exponents.size() || ref.errors.size() != ref.exponents.size()) continue;
    ++n.points;
    for (std::size_t i = 0; i < ref.exponents.size(); ++i) {
      const double d = ref.exponents[i], de = ref.errors[i];
      if (!all && !(std::fabs(d) > std::max(1e-9, de))) continue;
      ++n.compared;
      const double dev = std::fabs(r.exponents[i] - d);
      // The new error is a superset of the old one (docs/model.md).
      EXPECT_GE(r.errors[i], r.standard_errors[i]);
      n.outside_new += dev > 2 * r.errors[i] + de;
      n.outside_old += dev > 2 * r.standard_errors[i] + de;
      n.outside_old_1e12 += dev > 2 * r.standard_errors[i] + de + 1e-12;
    }
  }
  const double pc = 100.0 / std::max(1, n.compared);
  std::printf("  %d points, %d exponents compared, outside: %d (%.2f %%) +-2 err; %d (%.2f %%) +-2 SE, "
              "%d (%.2f %%) +-(2 SE + 1e-12)\n",
              n.points, n.compared, n.outside_new, pc * n.outside_new, n.outside_old, pc * n.outside_old,
              n.outside_old_1e12, pc * n.outside_old_1e12);
  return n;
}

// shear2 rings and chains with a and b drawn in [-2, 2] (zeros included: the
// shears and identities give the Jordan blocks and equal moduli whose slow
// convergence the bias term is for), and cat-kicked ones (general S).
// The tangent keys are the defaults (docs/config.md), written out.
constexpr const char* kCircuits = R"(
[[sweep]]
name = "ring"
sites = [8, 12, 16]
boundary = "periodic"
seeds = { from = 1, to = 8 }
[sweep.bond]
family = "shear2"
a = { draw = [-2, 2] }
b = { draw = [-2, 2] }

[[sweep]]
name = "chain"
sites = [10, 14]
boundary = "open"
seeds = { from = 1, to = 8 }
[sweep.bond]
family = "shear2"
a = { draw = [-2, 2] }
b = { draw = [-2, 2] }

[[sweep]]
name = "kick"
sites = [8, 12]
boundary = ["periodic", "open"]
seeds = { from = 1, to = 4 }
[sweep.bond]
family = "shear2"
a = { draw = [-2, 2] }
b = { draw = [-2, 2] }
[sweep.site]
family = "cat"
a = { draw = [0, 3] }
b = 1

[spectrum]
method = "tangent"
[spectrum.tangent]
periods = 2000
transient = 200
windows = 20
)";

// The fraction outside +-2 errors is at most the 1 % that docs/model.md
// states (measured there over 520 circuits: 0.03 %), and the check can fail:
// the window standard error alone, the estimate before issue 9, exceeds the
// same 1 % even with 1e-12 added for rounding (measured here: 5 %).
TEST(TangentCoverage, FrozenCircuitsAgainstDense) {
  const Count n = coverage(kCircuits, false);
  EXPECT_EQ(n.points, 56);
  EXPECT_GE(n.compared, 700);  // not vacuous
  EXPECT_LE(n.outside_new, 0.01 * n.compared);
  EXPECT_GT(n.outside_old_1e12, 0.01 * n.compared);
}

// The issue's case: a shear2 ring, L = 16, seed 1, a and b drawn in [-2, 2],
// T = 2000 (the sweep unnamed: its draws are keyed by the default name). All
// 2L exponents against dense within 2 err + the reference's own bound: the
// window standard error alone misses the exponents of its Jordan blocks on
// the unit circle (the tangent values there are ~5e-3 after 2000 periods, the
// standard error ~8e-4), the new error covers every exponent.
TEST(TangentCoverage, IssueCase) {
  const Count n = coverage(R"(
[[sweep]]
sites = 16
boundary = "periodic"
seeds = [1]
[sweep.bond]
family = "shear2"
a = { draw = [-2, 2] }
b = { draw = [-2, 2] }
[spectrum]
method = "tangent"
)", true);
  EXPECT_EQ(n.compared, 32);
  EXPECT_EQ(n.outside_new, 0);
  EXPECT_GE(n.outside_old_1e12, 8);
}

}  // namespace
}  // namespace toral

int main(int argc, char** argv) {
  ::testing::InitGoogleTest(&argc, argv);
  SlepcInitialize(&argc, &argv, nullptr, nullptr);
  const int rc = RUN_ALL_TESTS();
  SlepcFinalize();
  return rc;
}
