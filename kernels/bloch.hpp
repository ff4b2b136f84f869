// Bloch decomposition of translation-invariant brick-wall circuits on a
// periodic ring, and the thermodynamic limit L -> infinity.
//
// Unit cell j holds sites x_j = 2j and y_j = 2j + 1. The even layer acts
// inside a cell, the odd layer joins y_j and x_{j+1}. For a plane wave with
// x_{j+1} = z x_j, z = exp(ik), one period is the small matrix M(z): 2x2 on
// (q_x, q_y) for position-class circuits (the momenta follow M(z)^-T), else
// 4x4 on (q_x, p_x, q_y, p_y). A ring of L sites has the L/2 momenta
// k_m = 2 pi m / (L/2), m = 0 .. L/2 - 1.
#pragma once
#include <complex>
#include <string>
#include <vector>

#include "spectrum.hpp"

namespace toral {

// The Bloch matrix at momentum k (row-major, dim x dim, dim = 2 or 4).
std::vector<std::complex<double>> bloch_matrix(const Circuit& c, double k, int& dim);

// The Bloch block as a Laurent polynomial in z (any complex z, not only the
// unit circle): M(z) = coef[0] / z + coef[1] + coef[2] z, each row-major
// dim x dim with exact integer entries (held as doubles). `position` is true
// for the 2x2 block on (q_x, q_y) of position-class circuits (the momenta
// follow the symbol M(1/z)^-T), false for the 4x4 block. Depends on the gates
// only (any boundary, any L); throws ModelError when the circuit is not
// translation invariant and InvalidInput when an entry exceeds 2^53.
struct BlochSymbol {
  int dim = 0;
  bool position = false;
  std::vector<double> coef[3];
};
BlochSymbol bloch_symbol(const Circuit& c);

// The 4 exponents of S contributed by momentum k, sorted descending, +- paired.
// (Checks translation invariance, O(L), on every call.)
std::vector<double> bloch_exponents(const Circuit& c, double k);

// Full finite-ring spectrum of a translation-invariant periodic circuit.
// The zero exponents are decided exactly (bloch_exact.hpp; ZeroRule::Exact),
// unless that analysis fails (ZeroRule::Numerical). Blocks whose error
// estimate exceeds 1e-10 (huge gate entries, near-defective blocks) are
// recomputed from certified enclosures of the roots of the exact F(lambda, z).
Spectrum bloch_spectrum(const Circuit& c);

// The spectrum of the periodic ring of the same gates as the translation-
// invariant lattice g (any boundary; L rounded up to even, as the brick-wall
// needs): for an open chain, what a bulk region sees while its backward light
// cone stays inside (docs/rays.md). The ring's L is spectrum.exponents.size() / 2.
Spectrum twin_ring_spectrum(const GateSource& g);

// Per-site quantities of the same circuit for L -> infinity. The circuit's L
// only fixes the gates; any even L >= 2 describes the same limit. The KS
// integral is split at the kinks (where eigenvalues leave the unit circle,
// bloch_exact.hpp) and arcs with every eigenvalue on the circle contribute
// exactly 0; `accuracy` adds the quadrature error estimates and the largest
// pointwise eigenvalue error of the integrand.
struct BulkLimit {
  double lambda_max = 0.0;  // sup over k of the largest exponent
  double ks_density = 0.0;  // (1/2pi) int dk (1/2) sum of positive exponents at k
  double accuracy = 0.0;    // estimated absolute error of the two values above
  std::vector<double> hist_counts;  // exponent density: fraction per bin
  std::vector<double> hist_edges;   // bins + 1 edges on [-lambda_max, lambda_max]
  double hist_accuracy = 0.0;       // max change of a bin under grid refinement
  bool zero_certified = false;      // the elliptic arcs (exact zeros) come from bloch_exact.hpp
};
BulkLimit bulk_limit(const Circuit& c, int bins, double tol = 1e-10);

// ---- bands: the exponents of each block as functions of the momentum

// Class of the block M(z) at one momentum, from its eigenvalue moduli:
// elliptic = every eigenvalue on the unit circle (all four exponents zero),
// parabolic = every eigenvalue on the circle with a collision (a kink: a pair
// about to leave the circle; exponents zero), hyperbolic = some eigenvalue
// off the circle (a positive exponent).
enum class BlockClass : int { Elliptic = 0, Parabolic = 1, Hyperbolic = 2 };

struct Bands {
  std::vector<double> k;          // the momenta
  std::vector<double> exponents;  // 4 per momentum, descending (+- paired)
  std::vector<double> errors;     // 4 per momentum: estimated absolute error (0 for an exact zero)
  std::vector<int> classes;       // BlockClass per momentum
  bool exact = false;             // zeros and classes decided by bloch_exact (else by the error estimate)
  std::string note;               // why the exact analysis failed, or a warning ("" when none)
};

// The bands of a finite ring: its L/2 momenta k_m = 2 pi m / (L/2), m = 0 ..
// L/2 - 1, each with the four exponents bloch_spectrum takes from it (same
// values, same exact zeros: their union is bloch_spectrum's spectrum).
Bands ring_bands(const Circuit& c);

// The bands of the bulk (L -> infinity) at momenta k in [0, pi] (the
// exponents at -k are the same): exact zeros from the arcs' unit-circle
// counts, certified exponents where double precision is poor and at k = 0,
// pi. Depends on the gates only (any boundary, any L).
Bands bulk_bands(const Circuit& c, const std::vector<double>& k);

// The momentum ranges of each class on [0, pi]: the arcs between kinks
// (elliptic where all four eigenvalues are on the circle, else hyperbolic)
// and the kinks themselves (the parabolic points, including 0 and pi when a
// root-of-unity kink sits there). Throws SolverError (kernels/errors.hpp) when the exact
// analysis fails.
struct BandArcs {
  std::vector<double> lo, hi;     // arc (lo, hi), ascending, covering [0, pi]
  std::vector<int> on_circle;     // unit-circle eigenvalues on the arc (0, 2 or 4)
  std::vector<int> classes;       // BlockClass of the arc
  std::vector<double> kinks;      // parabolic points, ascending
};
BandArcs band_arcs(const Circuit& c);

}  // namespace toral
