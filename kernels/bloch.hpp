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
#include <vector>

#include "spectrum.hpp"

namespace toral {

// The Bloch matrix at momentum k (row-major, dim x dim, dim = 2 or 4).
std::vector<std::complex<double>> bloch_matrix(const Circuit& c, double k, int& dim);

// The 4 exponents of S contributed by momentum k, sorted descending, +- paired.
// (Checks translation invariance, O(L), on every call.)
std::vector<double> bloch_exponents(const Circuit& c, double k);

// Full finite-ring spectrum of a translation-invariant periodic circuit.
// The zero exponents are decided exactly (bloch_exact.hpp; ZeroRule::Exact),
// unless that analysis fails (ZeroRule::Numerical). Blocks whose error
// estimate exceeds 1e-10 (huge gate entries, near-defective blocks) are
// recomputed from certified enclosures of the roots of the exact F(lambda, z).
Spectrum bloch_spectrum(const Circuit& c);

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

}  // namespace toral
