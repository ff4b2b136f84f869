// The growth rate a given region's Gaussian entanglement actually reaches:
// the late-time rate of the log-volume ln vol_{2m}(P_B S^t) of the 2m rows of
// S^t on a set B of m sites (their q and p rows), exactly.
//
// Why it is the rate of S_A(t). For a Gaussian state with covariance
// sigma0 = (1/2) I (the vacuum) the reduced covariance is
// sigma_A(t) = (1/2) R_t R_t^T with R_t = P_A S^t, and its symplectic
// eigenvalues nu_j (j = 1..|A|) have prod_j nu_j^2 = det sigma_A, so
//   ln vol(R_t) = (1/2) ln det(R_t R_t^T) = |A| ln 2 + sum_j ln nu_j.
// With f(nu) = (nu+1/2) ln(nu+1/2) - (nu-1/2) ln(nu-1/2) (the mode entropy)
// and g(nu) = f(nu) - ln nu, which increases from g(1/2) = ln 2 to 1 (its
// derivative 2 artanh(1/(2 nu)) - 1/nu is positive), this gives, for every t,
//   ln vol(R_t) <= S_A(t) <= ln vol(R_t) + |A| (1 - ln 2).
// Any other Gaussian product state (squeezings s_i) changes det sigma_A by
// a factor between min_i s_i^{+-2|A|} and max_i s_i^{+-2|A|}, so again by a
// bounded amount. Hence S_A(t) and ln vol(R_t) have the same growth rate, for
// every region and every Gaussian product state: this is the rate the region
// reaches, a rate and not a bound (S_A(t) - S_A(0) may exceed rate * t by
// O(|A|) nats, and early transients by more). For a generic region it equals
// Lambda_|A|, the sum of the 2 min(|A|, L - |A|) largest Lyapunov exponents
// (Bianchi, Hackl & Yokomizo, JHEP 03 (2018) 025); a region in a special
// position (e.g. one invariant under a symmetry of a translation-invariant
// circuit, whose rows then miss some of the top Oseledets directions exactly)
// reaches less.
//
// Complement: for symplectic S^t the 2|A| rows on A and the 2(L - |A|) rows on
// the complement span symplectic complements, and vol(P_A S^t) =
// vol(P_{A^c} S^t) exactly (pure global state: S_A = S_{A^c}); the kernel
// uses the smaller of the two sets, as Lambda does, and returns NaN for
// |A| = L (and for an empty region), where Lambda_|A| is undefined.
//
// Why exactly. The rows are propagated as exact integers (FLINT fmpz),
// R_{t+1} = R_t S on the light-cone columns (those that can be non-zero), and
// ln vol(R_t) = (1/2) ln det G_t, G_t = R_t R_t^T, is evaluated from the exact
// R_t each t: sum_i ln L_ii of the Cholesky factor of G_t formed in arb ball
// arithmetic at a working precision that doubles until the certified radius
// is below 1e-14 relative (it has to cover the condition number of G_t, about
// e^{2 (lambda_1 - lambda_min) t} over the region's directions, not the size
// of R_t's entries; it carries over from one t to the next); past four times
// the entries' bit size the exact determinant of the exact Gram matrix
// (fmpz_mat_gram, fmpz_mat_det; det G_t >= 1, R_t being an integer matrix of
// full row rank) is taken. det G_t is the product of the squared diagonal of
// the QR factorisation of R_t's rows, so this is the QR (Benettin) log-volume
// without accumulated rounding: each t starts again from the exact rows. A
// floating QR that re-orthonormalises the rows every period is NOT enough:
// rounding seeds components along the directions the region's rows miss
// exactly, which then grow at the generic rate, and the floating rate drifts
// from the region's rate to Lambda_|A| (bench/region_rate.py: the symmetric
// region {0, 4} of an 8-site ring, exact rate 0.736 Lambda_2, gives Lambda_2
// in floating point at T = 200).
//
// Cost: the entries of R_t have about lambda_max t / ln 2 bits; per t the
// update costs 2m * nnz(S on the light cone) small-by-big products; on the
// window (t >= from_t) the Gram matrix costs m(2m+1) dot products of
// light-cone length (at most 2L) at the working precision and the Cholesky
// factor O(m^3). Memory: R_t and G_t (region_rate_work_bytes).
#pragma once
#include <cstddef>
#include <cstdint>
#include <vector>

#include "model.hpp"

namespace toral {

// The late-time window t0..T of every least-squares slope of a curve with
// n = T + 1 points: t0 = min(ceil(3T/4), T - 1), so at least two points.
// (n must be >= 2.)
std::size_t late_window_start(std::size_t n);

// Least-squares slope of y(t), t = 0..n-1, over the late window above (NaN
// for n < 2, or when a value in the window is NaN).
double late_slope(const double* y, std::size_t n);

struct RegionRateOptions {
  // ln vol is formed for t >= from_t only (NaN before it); the rate's window
  // needs t >= late_window_start(T + 1).
  std::int64_t from_t = 0;
};

struct RegionRate {
  std::vector<double> log_volume;        // t = 0..T: ln vol_{2m}(P_B S^t), nats; NaN for t < from_t
  std::vector<double> radius;            // certified: |ln vol(t) - log_volume[t]| <= radius[t]
  double rate = 0.0;                     // late_slope(log_volume), nats/period (NaN for T = 0)
  std::int64_t sites = 0;                // m = |B| = min(|A|, L - |A|)
  bool complement = false;               // B is the complement of A (|A| > L/2)
  std::vector<std::int64_t> bits;        // t = 0..T: largest bit size of an entry of R_t
  std::vector<std::int64_t> columns;     // t = 0..T: light-cone columns of R_t (<= 2L)
};

// The log-volume curve and rate of region `region` (distinct sites in
// [0, L), any order) under the time-periodic circuit c, t = 0..T. NaN curve
// and rate for an empty region or |A| = L. Throws InvalidInput (kernels/errors.hpp) for
// bad input (T < 0, a site out of range or repeated, from_t < 0), ModelError
// for an invalid circuit, OverflowError if S itself overflows int64.
RegionRate region_rate(const Circuit& c, const std::vector<std::int64_t>& region, std::int64_t T,
                       const RegionRateOptions& opt = {});

// Working memory (bytes, about) of region_rate for a region of `region_size`
// sites of an L-site lattice to T, extrapolated linearly from `probe`, the
// same region computed to at least t2 (0 <= t1 < t2 <= T): R_t and G_t at T.
double region_rate_work_bytes(const RegionRate& probe, std::int64_t t1, std::int64_t t2, std::int64_t T,
                              std::size_t region_size, std::int64_t L);

}  // namespace toral
