// Lyapunov spectra of one period S and the per-point chaos summary.
#pragma once
#include <cstdint>
#include <string>
#include <vector>

#include "model.hpp"

namespace toral {

enum class Method { None = 0, Bloch = 1, Dense = 2, Krylov = 3, Tangent = 4 };
const char* method_name(Method m);

// How the zero exponents of a spectrum were decided (/chaos/zero_certified).
enum class ZeroRule : std::int32_t {
  Unknown = -1,    // only the top of the spectrum is known (krylov, tangent)
  Numerical = 0,   // |lambda| within its error estimate (not a proof)
  Exact = 1,       // from the exact integer characteristic polynomial (unit_circle.hpp,
                   // bloch_exact.hpp): zero exponents are exactly 0.0, the others are not 0
};

// A full Lyapunov spectrum of S: all 2L exponents ln|mu|, sorted descending.
struct Spectrum {
  Method method = Method::None;
  std::vector<double> exponents;  // size 2L, descending
  std::vector<double> errors;     // per-exponent error estimates (same order), or empty
  // Accuracy estimates:
  double pairing_defect = 0.0;  // max_i |lambda_i + lambda_{2L+1-i}|
  double sum_defect = 0.0;      // |sum_i lambda_i| of what was diagonalised
  double error_bound = 0.0;     // estimated absolute error of one exponent
  // Exponents that are exactly zero. With ZeroRule::Exact they are stored as
  // 0.0 (with error 0) and every other exponent is certainly nonzero.
  ZeroRule zero_rule = ZeroRule::Numerical;
  std::int64_t zero_count = -1;
  // Non-empty when the numbers failed an internal consistency check (e.g. an
  // exponent the exact count makes zero lies outside its own error estimate).
  std::string warning;
  // Every exponent comes from certified root enclosures of the exact
  // characteristic polynomial (errors are rigorous radii), not from LAPACK.
  bool certified_values = false;
};

// Sets the `zeros` exponents nearest zero (the middle of the sorted,
// +- paired list) to exactly 0.0 with error 0 and marks the spectrum
// ZeroRule::Exact. When some exponent kept as nonzero lies, within its error
// estimate, as close to zero as one set to zero (an ambiguous choice), that
// is reported in `warning`.
void apply_exact_zeros(Spectrum& s, std::int64_t zeros);

// Fills pairing_defect and sum_defect from the (sorted) exponents.
void measure_pairing(Spectrum& s);

// Per-point quantities derived from a full spectrum.
struct ChaosSummary {
  double lambda_max = 0.0;          // largest exponent
  double ks_rate = 0.0;             // h = sum of positive exponents, per period
  double ks_density = 0.0;          // h / L
  std::int64_t unstable_count = 0;  // number of positive exponents
  std::int64_t zero_count = 0;      // number of zero exponents (see Spectrum::zero_rule)
  std::vector<double> kept;         // all 2L if 2L <= keep_all, else the top `top`
  std::vector<double> hist_counts;  // fraction of the 2L exponents per bin
  std::vector<double> hist_edges;   // bins + 1 edges on [-lambda_max, lambda_max]
};

struct SummaryOptions {
  std::int64_t keep_all = 1024;  // store every exponent when 2L <= keep_all
  std::int64_t top = 32;         // else the top this many
  int bins = 40;                 // histogram bins
  double zero_tol = 1e-9;  // without an exact zero count: exponents up to max(zero_tol, error) count as zero
};

ChaosSummary summarize(const Spectrum& s, std::int64_t L, const SummaryOptions& o);

// Histogram of `values` on `bins` equal bins over [lo, hi] (values outside are
// clamped into the end bins); counts are fractions of values.size(). Values
// with |v| <= zero are exact zeros blurred by rounding: when 0 is a bin edge
// they count half in each neighbouring bin, so their noisy sign cannot skew
// the histogram.
void histogram(const std::vector<double>& values, double lo, double hi, int bins,
               std::vector<double>& counts, std::vector<double>& edges, double zero = 0.0);

// Dense LAPACK spectrum. Position-class circuits diagonalise only the L x L
// block M; others the 2L x 2L matrix S. While that dimension is at most
// `certify_max`, the zero exponents are decided exactly from the integer
// characteristic polynomial (unit_circle.hpp; cost grows like dim^3 times the
// coefficient size: about 0.05 s at 128, 1-2 s at 256, 30 s at 512 on a 2024
// laptop core); beyond it they are the exponents within their error estimate
// (ZeroRule::Numerical). Throws ModelError for bad circuits and
// SolverError when LAPACK fails.
Spectrum dense_spectrum(const Circuit& c, std::int64_t certify_max = 256);

// Eigenvalues of a dense real row-major n x n matrix with LAPACK dgeevx, with
// an error estimate per eigenvalue: the first-order bound eps ||A|| / rcond
// (LAPACK Users' Guide, section 4.8), or, where that is larger, the radius
// 2 ||A|| eps^(1/m) of a cluster of m computed eigenvalues around it (an
// m x m Jordan block perturbed by eps ||A|| moves its eigenvalue by about
// that much: Wilkinson, The Algebraic Eigenvalue Problem, 1965, ch. 2).
struct DenseEig {
  std::vector<double> re, im, err;
};
DenseEig dense_eigenvalues(std::vector<double> a, std::int64_t n);

}  // namespace toral
