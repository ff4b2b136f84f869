// Velocity-dependent Lyapunov exponents of a translation-invariant circuit,
// from its Bloch symbol continued to complex momentum (the chronotopic
// approach: exponentially weighted perturbations).
//
// The block M(z) = A_- / z + A_0 + A_+ z (bloch.hpp: BlochSymbol) acts on a
// mode x_j = z^j x_0 of the unit cells j (two sites each). The response of
// cell n at time t to a unit perturbation of cell 0 is the coefficient of
// z^-n in M(z)^t, i.e. (1/2 pi i) \oint M(z)^t z^(n-1) dz on any circle
// |z| = e^mu. With the weighted growth rate
//
//   Lambda(mu) = max_k ln rho(M(e^(mu + i k)))      (rho: spectral radius)
//
// this bounds |x_t(n)| by e^(t Lambda(mu) + mu n) for every mu, and the
// saddle point makes the bound sharp for large t: along a ray n = u t (u in
// cells per period)
//
//   lambda(u) = min over mu of [ Lambda(mu) + mu u ],
//
// a Legendre transform (Deissler & Kaneko, Phys. Lett. A 119 (1987) 397;
// Lepri, Politi & Torcini, J. Stat. Phys. 82 (1996) 1429, who write it as
// lambda(v) = Lambda(mu) - mu dLambda/dmu with v = -dLambda/dmu in their
// sign convention). Lambda is convex (log rho(M(z)) is subharmonic in z,
// Vesentini 1968, and the maximum of a subharmonic function over the circle
// |z| = r is a convex function of ln r, Hadamard's three-circle theorem), so
// lambda is concave, the minimum is unique, and:
//  * max_u lambda(u) = Lambda(0) = the Bloch lambda_max of the bulk, reached
//    at u = -Lambda'(0);
//  * lambda(0) = min_mu Lambda(mu), the rate seen at a fixed site (absolute
//    growth rate); Lambda >= 0 here (det M(z) = 1), so lambda(0) >= 0;
//  * lambda(u) = -inf outside the light cone [-s_+, s_-], where s_+- are the
//    slopes of Lambda at mu -> +-inf, read exactly from the Newton polygon of
//    det(x - M(z)) (integer Laurent coefficients); at the cone's edges
//    lambda is ln|C| of the leading Puiseux coefficient;
//  * the butterfly velocities, where lambda crosses 0 (the edges of the
//    region where perturbations grow): u_B+ = min_{mu<0} Lambda(mu)/(-mu) and
//    u_B- = -min_{mu>0} Lambda(mu)/mu (the light cone's edge when lambda is
//    still >= 0 there).
// Velocities in the interface are in sites per period (2 per cell).
//
// Position-class circuits: the 2x2 block carries q; p follows M(1/z)^-T,
// whose weighted rate is Lambda_q(-mu) (det M = 1), so p perturbations see
// lambda_q(-v). General circuits: the 4x4 block (q and p mix).
#pragma once
#include <vector>

#include "model.hpp"

namespace toral {

struct VelocityExponents {
  std::vector<double> v;       // sites per period (the input grid)
  std::vector<double> lambda;  // lambda(v); -inf outside the light cone
  std::vector<double> error;   // estimated absolute error of lambda (0 for -inf)
  double cone_left = 0, cone_right = 0;  // the light cone, sites per period (cone_left <= 0 <= cone_right)
  double edge_left = 0, edge_right = 0;  // lambda at the cone's edges
  double peak = 0, peak_error = 0;       // max_v lambda(v) = Lambda(0)
  double peak_velocity = 0;              // where it is reached (sites per period)
  double absolute = 0, absolute_error = 0;  // lambda(0)
  // v_B- <= v_B+ (sites per period): lambda >= 0 between them. NaN when
  // lambda_max = 0 (no growth: every eigenvalue of every block on the circle).
  double butterfly_left = 0, butterfly_right = 0, butterfly_error = 0;
  bool position = false;  // 2x2 position-class block (else 4x4)
};

// lambda(v) on the given velocities (sites per period) for the q (momentum =
// false) or p perturbations of a translation-invariant circuit (any boundary:
// the bulk gates). Throws ModelError for a circuit that is not translation
// invariant, SolverError when the symbol's coefficients are too large for
// the exact light cone (beyond 2^40) or a minimisation fails.
VelocityExponents velocity_exponents(const Circuit& c, bool momentum, const std::vector<double>& v);

// The weighted growth rate Lambda(mu) (momentum as above), with its
// estimated absolute error in `err` when given. For tests and plots.
double weighted_rate(const Circuit& c, bool momentum, double mu, double* err = nullptr);

}  // namespace toral
