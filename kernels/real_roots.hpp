// Certified positive real roots of an integer polynomial.
//
// Two layers:
//
//  - positive_roots(): every distinct root x > 0 of a nonzero p in Z[x], each
//    with its multiplicity and a certified arb ball that contains it and no
//    other root, to a requested relative accuracy. Every step is decided by
//    exact integer arithmetic: FLINT's squarefree factorisation, then per
//    factor either the sign-proof route below (when it applies) or Descartes'
//    rule of signs with bisection (Vincent-Collins-Akritas isolation on
//    dyadic intervals, by exact Taylor shifts) followed by bisection on the
//    exact signs of the factor at dyadic points. The root 0 is counted
//    separately (it is not positive); negative and non-real roots are not
//    reported.
//
//  - the routes used by the exact kernels (gaussian_exact) on polynomials
//    whose roots are known by theory to be all real, positive and (after
//    factoring) simple, and may span thousands of binary orders of
//    magnitude: separated_positive_roots() (double-mantissa Durand-Kerner,
//    exact Newton steps and an exact-sign proof) and
//    validated_positive_roots() (Newton-polygon starts refined and validated
//    by arb). They return false, never a wrong enclosure, when the
//    polynomial is not of that kind or the method does not succeed.
//
// No MPI, no HDF5, no printing (kernels rule, DEVELOPERS.md).
#pragma once
#include <acb.h>
#include <arb.h>
#include <flint/fmpz_poly.h>

#include <cstdint>
#include <memory>
#include <stdexcept>
#include <utility>
#include <vector>

#include "errors.hpp"
#include "flint_raii.hpp"

namespace toral {

// Invalid input to positive_roots / positive_root_count: the zero polynomial
// (or no coefficients), or a requested accuracy outside [1, kMaxRootBits].
class RealRootsError : public InvalidInput {
 public:
  using InvalidInput::InvalidInput;
};

inline constexpr std::int64_t kMaxRootBits = std::int64_t{1} << 20;

struct RootOptions {
  // Try the sign-proof route (separated_positive_roots) on each squarefree
  // factor whose coefficients alternate in sign before Descartes' bisection.
  // false: Descartes' bisection only (for cross-checks; same roots, balls of
  // at least the same accuracy).
  bool fast = true;
};

struct PositiveRoots {
  std::int64_t degree = 0;   // degree of p
  std::int64_t at_zero = 0;  // multiplicity of the root 0 (not counted below)
  // Per distinct positive root, ascending:
  std::vector<std::int64_t> multiplicity;
  // Certified balls, pairwise disjoint, each containing exactly one root of p
  // with arb_rel_accuracy_bits >= the requested bits (radius 0 when the root
  // is a dyadic rational met exactly).
  std::vector<std::unique_ptr<flint::Ball>> balls;
  // The same as doubles: |root - mid[i]| <= radius[i] (certified; includes
  // the rounding of the midpoint to double).
  std::vector<double> mid, radius;
  std::int64_t size() const { return static_cast<std::int64_t>(multiplicity.size()); }
  // Number of positive roots counted with multiplicity.
  std::int64_t count_with_multiplicity() const;
};

// The distinct positive roots of p (see above), each to at least rel_bits
// relative bits. Throws RealRootsError when p is zero or rel_bits is outside
// [1, kMaxRootBits]. The cost of the bisection grows with the number of
// binary orders the roots span and with the bits that separate the closest
// pair; polynomials whose roots are all real and positive take the
// sign-proof route, which has neither cost. Throws SolverError (kernels/errors.hpp) in the
// (theoretically possible, never met) case that roots of two different
// squarefree factors cannot be told apart within kMaxRootBits bits.
PositiveRoots positive_roots(const fmpz_poly_struct* p, std::int64_t rel_bits, const RootOptions& opt = {});
// The same from coefficients, lowest degree first.
PositiveRoots positive_roots(const std::vector<std::int64_t>& coeffs_low_to_high, std::int64_t rel_bits,
                             const RootOptions& opt = {});

// Number of distinct positive roots of p, exactly (Descartes' bisection, no
// refinement). Throws RealRootsError for the zero polynomial.
std::int64_t positive_root_count(const fmpz_poly_struct* p);

// ---- Routes for polynomials whose d = deg f roots are all real, positive and
// simple (f in Z[x], d >= 1). Each writes d disjoint enclosures, one per
// root, to roots[0..d), real parts to at least target_bits relative bits and
// imaginary parts exactly 0, and returns true; or returns false (roots then
// hold no meaning) when f is not of that kind or the route did not succeed.

// Starting points from the Newton polygon of f, Durand-Kerner in double
// mantissas with 64-bit exponents to about double precision, then per root
// Newton steps on the real line in (target_bits + 72)-bit floating point on
// the terms that matter near it, and a proof by exact integer signs: f changes
// sign across each of d disjoint intervals [r (1 - 2^-b), r (1 + 2^-b)],
// b = target_bits + 8, so each holds exactly one root (and f is squarefree).
// False also when roots are closer than double precision can tell apart.
// The enclosures come in ascending order.
bool separated_positive_roots(acb_ptr roots, const fmpz_poly_struct* f, slong target_bits);

// Starting points from the Newton polygon of f (spread on circles as in
// Bini's method), arb's Durand-Kerner sweeps until every root moved by less
// than 2^(16 - prec) relative, then rigorous isolation
// (_acb_poly_validate_roots) and a proof of reality
// (_acb_poly_validate_real_roots), at prec = target_bits + 32 doubled up to
// max_tries times. f must be squarefree for this to succeed. The enclosures
// come in no particular order.
bool validated_positive_roots(acb_ptr roots, const fmpz_poly_struct* f, slong target_bits, int max_tries);

// Midpoint of the ball x rounded to double and a certified bound on
// |x - midpoint| (the ball's radius plus the rounding), rounded up.
std::pair<double, double> ball_to_double(const arb_struct* x);

}  // namespace toral
