// Velocity-dependent Lyapunov exponents from the Bloch symbol (kernels/rays).
// References: Legendre duality, max_v lambda(v) = Lambda(0) = the bulk
// lambda_max (common practice), against bulk_limit (an independent quadrature
// of the Bloch bands, itself checked against dense spectra in test_bloch);
// concavity of lambda(v) (Lambda is convex: Hadamard three circles for the
// subharmonic ln rho, from memory); the mirror lambda_p(v) = lambda_q(-v) of
// position-class circuits (det M(z) = 1); the unipotent chain's exact values
// (triangular block: lambda(0) = 0, and at the light cone's edge the
// amplitude is the product of the extreme coefficients: lambda(2) = ln b^2
// for shear2(0, b), worked by hand).
#include <gtest/gtest.h>

#include <cmath>
#include <random>

#include "bloch.hpp"
#include "rays.hpp"
#include "test_gates.hpp"

namespace toral {
namespace {

using namespace testgates;

Circuit ring(const BondGate& g, std::int64_t L = 8, Boundary b = Boundary::Periodic) {
  Circuit c;
  c.L = L;
  c.boundary = b;
  c.bonds.assign(static_cast<std::size_t>(c.bond_count()), g);
  return c;
}

std::vector<double> grid(int n) {
  std::vector<double> v;
  for (int i = 0; i < n; ++i) v.push_back(-2.0 + 4.0 * i / (n - 1));
  return v;
}

TEST(Rays, PeakIsBulkLambdaMaxAndCurveIsConcave) {
  std::mt19937_64 rng(7);
  std::vector<BondGate> gates = {BondGate::position(m2(2, 1, 1, 1)), BondGate::position(two_shear(1, 2)),
                                 BondGate::position(two_shear(-2, 3))};
  for (int n = 0; n < 4; ++n) {  // random products of elementary Sp(4, Z) shears
    Mat4 G = Mat4::identity();
    for (int f = 0; f < 4; ++f)
      G = checked_matmul(G, elementary_shear4(static_cast<int>(rng() % 4), static_cast<std::int64_t>(rng() % 5) - 2));
    gates.push_back(BondGate::symplectic(G));
  }
  for (const BondGate& g : gates) {
    const Circuit c = ring(g);
    const BulkLimit b = bulk_limit(c, 8);
    const VelocityExponents r = velocity_exponents(c, false, grid(81));
    EXPECT_NEAR(r.peak, b.lambda_max, 1e-9 + b.accuracy + r.peak_error);  // near-defective blocks: eps^(1/m)
    double err = 0;
    EXPECT_NEAR(weighted_rate(c, false, 0.0, &err), r.peak, 1e-12 + err);
    for (std::size_t i = 0; i < r.v.size(); ++i) {
      if (!std::isfinite(r.lambda[i])) continue;
      EXPECT_LE(r.lambda[i], r.peak + r.peak_error + r.error[i] + 1e-12);
      EXPECT_GE(r.lambda[i], -1e-9);  // lambda(v) >= 0 inside the cone here (integer amplitudes never decay)
      if (i > 0 && i + 1 < r.v.size() && std::isfinite(r.lambda[i - 1]) && std::isfinite(r.lambda[i + 1])) {
        EXPECT_LE(r.lambda[i - 1] + r.lambda[i + 1] - 2 * r.lambda[i], 1e-8);
      }
    }
    EXPECT_LE(r.absolute, r.peak + r.peak_error + r.absolute_error + 1e-12);
    EXPECT_GE(r.absolute, -1e-9);
    EXPECT_LE(r.cone_left, 0.0);
    EXPECT_GE(r.cone_right, 0.0);
  }
}

TEST(Rays, MomentumMirrorsPositionClass) {
  const Circuit c = ring(BondGate::position(two_shear(0, 3)));
  const VelocityExponents q = velocity_exponents(c, false, grid(41)), p = velocity_exponents(c, true, grid(41));
  for (std::size_t i = 0; i < 41; ++i) {
    const double a = q.lambda[i], b = p.lambda[40 - i];
    if (std::isinf(a)) {
      EXPECT_EQ(a, b);
    } else {
      EXPECT_NEAR(a, b, 1e-9);
    }
  }
  EXPECT_DOUBLE_EQ(q.cone_left, -p.cone_right);
}

TEST(Rays, UnipotentChain) {
  for (std::int64_t b : {2, 4, 7}) {
    const Circuit c = ring(BondGate::position(two_shear(0, b)), 16, Boundary::Open);
    const VelocityExponents r = velocity_exponents(c, false, grid(5));  // -2, -1, 0, 1, 2
    EXPECT_EQ(r.cone_left, 0.0);
    EXPECT_EQ(r.cone_right, 2.0);
    EXPECT_TRUE(std::isinf(r.lambda[0]) && std::isinf(r.lambda[1]));
    EXPECT_NEAR(r.lambda[2], 0.0, 1e-9);
    EXPECT_NEAR(r.absolute, 0.0, 1e-9);
    EXPECT_NEAR(r.lambda[4], std::log(static_cast<double>(b * b)), 1e-12);
    EXPECT_NEAR(r.butterfly_left, 0.0, 1e-6);
    EXPECT_EQ(r.butterfly_right, 2.0);
  }
}

TEST(Rays, NotTranslationInvariantIsRejected) {
  Circuit c = ring(BondGate::position(m2(2, 1, 1, 1)));
  c.bonds[3] = BondGate::position(m2(1, 1, 0, 1));
  EXPECT_THROW(velocity_exponents(c, false, grid(5)), ModelError);
}

}  // namespace
}  // namespace toral
