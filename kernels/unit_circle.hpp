// Exact count of the roots of an integer polynomial on the unit circle, and
// the exact characteristic polynomial of an integer matrix: the decision of
// which Lyapunov exponents of an integer map are exactly zero.
//
// A root mu of p in Z[x] with |mu| = 1 has conj(mu) = 1/mu, so it is also a
// root of the reversed polynomial x^deg p(1/x), with the same multiplicity
// (p is real). All of them are therefore roots of g = gcd(p, rev p), which
// is palindromic once the factors (x - 1) and (x + 1) are divided out:
// h(x) = x^m T(x + 1/x) with T in Z[y] of degree m (the trace polynomial).
// mu is on the unit circle exactly when y = mu + 1/mu = 2 Re(mu) is real and
// in (-2, 2), and each such root y of T gives the two roots mu, conj(mu). So
//
//   #{roots on |mu| = 1} = mult(1) + mult(-1) + 2 sum_f e_f #{roots of f in (-2, 2)}
//
// over the squarefree factorisation T = prod f^e_f. The roots of f in (-2, 2)
// are the positive roots of R(t) = (t + 1)^deg f(2 (t - 1) / (t + 1)), counted
// exactly by a Sturm sequence (FLINT). Every step is exact integer
// arithmetic: no tolerance, no rounding. (Kronecker's theorem makes the roots
// of unity the only unit-circle roots of a monic integer polynomial whose
// roots all lie on the circle; when only some do, non-cyclotomic factors such
// as Salem polynomials can still have roots on the circle, and this count
// includes them.)
#pragma once
#include <flint/fmpz_poly.h>

#include <cstdint>
#include <utility>
#include <vector>

#include "model.hpp"

namespace toral {

struct CircleCensus {
  std::int64_t degree = 0;        // degree of p
  std::int64_t at_zero = 0;       // multiplicity of the root 0
  std::int64_t on_circle = 0;     // roots with |mu| = 1, with multiplicity (includes +-1)
  std::int64_t at_one = 0;        // multiplicity of the root 1
  std::int64_t at_minus_one = 0;  // multiplicity of the root -1
};

// Census of a nonzero integer polynomial. Throws InvalidInput (kernels/errors.hpp) for
// the zero polynomial.
CircleCensus circle_census(const fmpz_poly_struct* p);
// The same from coefficients, lowest degree first (for tests and small cases).
CircleCensus circle_census(const std::vector<std::int64_t>& coeffs_low_to_high);

// The steps of circle_census before the count: fills c.degree, c.at_zero,
// c.at_one and c.at_minus_one (c.on_circle = at_one + at_minus_one) and sets T
// to the trace polynomial of gcd(p, rev p) without the roots 0 and +-1, whose
// real roots y in (-2, 2) are the other unit-circle roots as y = 2 Re(mu)
// (T = 1 when there are none).
void circle_trace_polynomial(fmpz_poly_struct* T, const fmpz_poly_struct* p, CircleCensus& c);

// T with h(x) = x^m T(x + 1/x), for a palindromic h of even degree 2m.
// Throws InvalidInput (kernels/errors.hpp) when h is not palindromic of even degree.
void trace_polynomial(fmpz_poly_struct* T, const fmpz_poly_struct* h);

// Number of roots of a squarefree f in Z[y] in the open interval (-2, 2),
// given f(2) != 0 and f(-2) != 0 (Sturm sequence after a Moebius map).
std::int64_t roots_between_minus2_and_2(const fmpz_poly_struct* f);

// det(x I - A) of a square integer matrix, exactly (FLINT, multi-modular).
void integer_charpoly(fmpz_poly_struct* out, const SparseInt& A);

// ln|mu| of every root of a nonzero integer polynomial p with p(0) != 0, with
// multiplicity, from certified enclosures: the roots of each squarefree
// factor are isolated by arb (arb_fmpz_poly_complex_roots) and refined until
// exactly `census.on_circle` of them have an enclosure of ln|mu| containing
// 0; those are returned as exactly 0 (radius 0), the others as (midpoint,
// radius) with the exact value within radius of the midpoint. Returns false
// when that is not reached by max_prec bits.
bool certified_log_moduli(const fmpz_poly_struct* p, const CircleCensus& census,
                          std::vector<std::pair<double, double>>& out, long max_prec = 4096);

// The exact spectral facts of what a spectrum method diagonalises (for a
// position-class circuit the L x L block M: spec S = spec M u 1/spec M, so
// each unit-circle root of det(x - M) gives two zero exponents of S; else S).
struct ExactSpectrum {
  std::int64_t zero_exponents = 0;  // exponents of S that are exactly zero
  // With certify = true: all 2L exponents of S, descending, as (value,
  // certified radius); empty when the enclosures could not be refined.
  std::vector<std::pair<double, double>> exponents;
};
ExactSpectrum exact_spectrum(const Circuit& c, bool certify);

// exact_spectrum(c, false).zero_exponents
std::int64_t exact_zero_exponents(const Circuit& c);

}  // namespace toral
