// Exact structure of the Bloch blocks of a translation-invariant brick-wall
// circuit: where on the Brillouin zone the eigenvalues of the one-period
// block sit on the unit circle (Lyapunov exponents exactly zero), decided
// from integer polynomials instead of a floating-point tolerance.
//
// With z = exp(ik), the 4x4 Bloch block M(z) on (q_x, p_x, q_y, p_y) (see
// bloch.hpp; position-class gates enter through their 4x4 embedding, so the
// block's four eigenvalue moduli are the four exponents of S at k) has
// integer Laurent entries, and
//
//   F(lambda, z) = z^s det(lambda I - M(z))   in Z[lambda, z]
//
// (s chosen so that F is a polynomial not divisible by z). For |z| = 1,
// M(z)^H J M(z) = J, so the eigenvalues of M(z) are closed under
// mu -> 1/conj(mu) (the partner map). An eigenvalue can only leave or reach
// the unit circle by colliding with its partner, i.e. where F has a repeated
// root in lambda: a zero of the discriminant D(z) of the squarefree part of
// F. So:
//  * kinks: the zeros of D on |z| = 1 (from the trace polynomial of
//    gcd(D, rev D), real roots in (-2, 2) isolated by arb and counted by a
//    Sturm sequence as a cross-check), k in [0, pi];
//  * arcs: between consecutive kinks the number of unit-circle eigenvalues is
//    constant; it is read at one interior point from certified root
//    enclosures (arb): an enclosure that misses the circle is off it, one
//    whose partner image meets no other enclosure is exactly on it;
//  * kinks that are roots of unity (cyclotomic factors Phi_d of D): a ring
//    momentum exp(2 pi i m / n) of order d = n / gcd(m, n) lies exactly on
//    such a kink; the momenta of order d together carry the roots of the
//    integer polynomial R_d(lambda) = Res_z(F, Phi_d), whose unit-circle
//    roots are counted exactly (unit_circle.hpp).
// Everything depends on the gates only, not on L or the boundary.
#pragma once
#include <cstdint>
#include <memory>
#include <utility>
#include <vector>

#include "intmat.hpp"

namespace toral {

struct BlochArc {
  double k_lo = 0.0, k_hi = 0.0;  // arc (k_lo, k_hi) inside [0, pi]
  int on_circle = 0;              // eigenvalues of the 4x4 block with |mu| = 1 (0, 2 or 4)
};

// Exact zero exponents of a finite ring of n cells (L = 2n sites).
struct RingZeros {
  // Per momentum m = 0..n-1 (k_m = 2 pi m / n): the number of the four
  // exponents of S at k_m that are exactly zero, or -1 when k_m lies on a
  // root-of-unity kink (its order's total is in `orbits`).
  std::vector<int> per_momentum;
  // (d, zero exponents summed over every momentum of order d) for each kink
  // order d that divides n.
  std::vector<std::pair<std::int64_t, std::int64_t>> orbits;
};

class BlochExact {
 public:
  // G: the 4x4 bond gate on (q_a, p_a, q_b, p_b); site: the one-site gate,
  // or nullptr without a one-site layer. Throws SolverError (kernels/errors.hpp) when the
  // exact analysis cannot be completed (a root that cannot be isolated within
  // the precision limit, a vanishing discriminant).
  BlochExact(const Mat4& G, const Mat2* site);
  ~BlochExact();
  BlochExact(const BlochExact&) = delete;
  BlochExact& operator=(const BlochExact&) = delete;

  // Arcs covering [0, pi] in order; kinks are their end points.
  const std::vector<BlochArc>& arcs() const;
  // Kinks in (0, pi) (ascending), as doubles (certified enclosures are
  // narrower than 1e-15 rad).
  const std::vector<double>& kinks() const;
  // Orders d of the root-of-unity kinks (z = 1 is d = 1, z = -1 is d = 2).
  const std::vector<std::int64_t>& kink_orders() const;
  // Unit-circle eigenvalues at momentum k in [0, 2 pi) away from kinks (the
  // arc's count; at a kink, the count of the arc on its left). For the bulk
  // limit, where single momenta have measure zero.
  int on_circle_near(double k) const;

  RingZeros ring_zeros(std::int64_t cells) const;

  // ln|mu| of every root of R_d = Res_z(F, Phi_d), i.e. the exponents of S at
  // all momenta of order d together (4 phi(d) values, descending), from
  // certified enclosures: the unit-circle roots as exact 0, the others as
  // (midpoint, radius). Empty when the enclosures cannot be refined.
  std::vector<std::pair<double, double>> orbit_exponents(std::int64_t d) const;

  // The four exponents ln|mu| of S at k = 2 pi m / n, descending, from
  // certified root enclosures of F(lambda, exp(ik)) (arb): value[j] is within
  // radius[j] of the exact exponent. Returns false when the roots cannot be
  // isolated within the precision limit (e.g. exactly on a kink).
  bool certified_exponents(std::int64_t m, std::int64_t n, double value[4], double radius[4]) const;
  // The same at k (radians, taken as the exact binary value of the double).
  bool certified_exponents_at(double k, double value[4], double radius[4]) const;

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

}  // namespace toral
