// Exact, certified entanglement entropies of Gaussian states under the linear
// symplectic dynamics x -> S x on R^{2L} (no periodic identification), S the
// one-period matrix of a brick-wall circuit (model.hpp).
//
// The initial state is a Gaussian product state with covariance sigma0
// (hbar = 1): per site the vacuum, block (1/2) I on (q_i, p_i), or a squeezed
// vacuum with rational s > 0, block diag(s/2, 1/(2s)). For a region A of k
// sites, R_t = P_A S^t (the 2k rows of S^t on A's q's, then A's p's) is kept
// exactly in integers (FLINT fmpz) and updated as R_{t+1} = R_t S on the
// columns inside the light cone; sigma_A(t) = R_t sigma0 R_t^T is exact.
//
// The symplectic (Williamson) eigenvalues nu_j of sigma_A(t) come from the
// exact characteristic polynomial of J_A sigma_A, an even polynomial whose
// roots are +-i nu_j, read as q(y) = prod_j (y - mu_j^2) with mu_j = 2 Den nu_j
// (Den the common denominator of sigma0):
//  - q is computed multi-modularly from the residues of G modulo 28-bit
//    primes (multimod.hpp: the residues of R_t are updated alongside R_t, G
//    mod p is formed from them, the characteristic polynomial of J G mod p by
//    the division-free Berkowitz algorithm, many primes side by side in
//    vector lanes; fmpz_comb CRT) under a rigorous coefficient bound: the
//    smaller of Hadamard-Fischer and a growth bound from the previous step
//    (sigma(t+1) <= g sigma(t) in the Loewner order, g = ||D^-1/2 S D^1/2||^2,
//    and monotonicity of symplectic eigenvalues, Bhatia & Jain 2015), which
//    is within a few primes of the true size; one more (62-bit) prime, with G
//    mod it taken straight from the exact R_t and FLINT's nmod arithmetic,
//    checks it, and on a mismatch FLINT's fmpz_mat_charpoly of the exact G is
//    used instead;
//  - Q(z) = q(z + Den^2) has roots z_j = 4 Den^2 (nu_j^2 - 1/4) >= 0, so the
//    pure modes nu = 1/2 are exactly the factor z^m and are split off
//    symbolically (contributing exactly 0 with radius 0);
//  - the remaining roots are certified real, positive and isolated to p
//    relative bits: approximations by Durand-Kerner in double mantissas with
//    64-bit exponents (the roots span thousands of binary orders), Newton
//    steps on the terms that matter near each root, then a proof by exact
//    integer signs of Q at the dyadic ends of d disjoint intervals (d sign
//    changes of a degree-d polynomial: one simple root in each, so Q is
//    squarefree; separated_positive_roots in real_roots.hpp). When that fails
//    Q is squarefree-factored (FLINT) to find repeated nu's and the parts are
//    tried again, then arb's path (Newton-polygon starts, Durand-Kerner,
//    _acb_poly_validate_roots and _acb_poly_validate_real_roots;
//    validated_positive_roots), with arb_fmpz_poly_complex_roots as the
//    last fallback. p = 64 + 2 ceil(log2(k+1))
//    at first: a relative error e of z moves f by at most ~e, so this is
//    ~1e-19 per mode; p doubles until the entropy's radius meets the target
//    (or max_prec_bits).
// f is evaluated from w = nu - 1/2 = z / (4 Den^2 (nu + 1/2)) without
// cancellation. The entropy
//   S_A = sum_j f(nu_j),  f(nu) = (nu+1/2) ln(nu+1/2) - (nu-1/2) ln(nu-1/2),
// is returned per t as a double midpoint and a certified radius: the exact
// value lies in [entropy - radius, entropy + radius] (the radius includes the
// rounding of the midpoint to double).
#pragma once
#include <cstdint>
#include <vector>

#include "model.hpp"

namespace toral {

// One site of the initial product state. squeezed = false: the vacuum (num
// and den are ignored). squeezed = true: s = num / den, which must be > 0
// (den != 0); the covariance block on (q_i, p_i) is diag(s/2, 1/(2s)).
struct GaussianSite {
  std::int64_t num = 1, den = 1;
  bool squeezed = false;
};

struct EntropyOptions {
  double target_radius = 1e-12;          // certified radius wanted for every S_A(t)
  std::int64_t max_prec_bits = 1 << 15;  // give up raising precision beyond this
  bool keep_spectrum = false;            // also return every nu_j(t) (with radii)
  // Memory (bytes, about) for the residues of R_t modulo the CRT primes. Past
  // it (wide light cones at late times) G is formed exactly each t and then
  // reduced: the same result, slower.
  std::int64_t residue_budget_bytes = std::int64_t{256} << 20;
  // false: skip the double-mantissa root approximation with exact-sign proof
  // and go straight to arb's isolation (for cross-checks; same enclosures).
  bool fast_roots = true;
  // Reference path for cross-checks (slow): FLINT's fmpz_mat_charpoly and
  // arb_fmpz_poly_complex_roots at every t instead of the fast routes above.
  bool reference = false;
};

struct EntropyCurve {
  // Per t = 0..T:
  std::vector<double> entropy;           // midpoint of S_A(t) (nats)
  std::vector<double> radius;            // certified: |S_A(t) - entropy[t]| <= radius[t]
                                         // (includes rounding entropy[t] to double:
                                         // half an ulp, ~1e-12 once S_A > 8192)
  std::vector<std::int64_t> bits;        // max bit size of an entry of R_t
  std::vector<std::int64_t> columns;     // columns of R_t kept (light cone), <= 2L
  std::vector<std::int64_t> pure_modes;  // number of nu_j = 1/2 exactly
  std::vector<std::int64_t> prec_bits;   // root precision that met the target
  std::vector<std::uint8_t> met_target;  // 1 when the enclosure's radius <= target_radius
  std::int64_t failures = 0;             // number of t with met_target == 0
  // Internal consistency: times the fast modular characteristic polynomial
  // failed its check prime and FLINT's slower one was used (expected 0).
  std::int64_t charpoly_fallbacks = 0;
  // Root factors whose fast Newton-polygon-started isolation did not succeed
  // and arb_fmpz_poly_complex_roots (slow for wide root ranges) was used.
  std::int64_t root_fallbacks = 0;
  // Only with keep_spectrum: nu[t] holds the k symplectic eigenvalues of
  // sigma_A(t) in descending order (repeated by multiplicity), nu_radius[t]
  // their certified radii (0 for the exact 1/2's).
  std::vector<std::vector<double>> nu, nu_radius;
};

// S_A(t) for t = 0..T. `init` has one entry per site (size c.L); `region` is a
// list of distinct sites in [0, L) (any order; empty gives S = 0).
// Throws InvalidInput (kernels/errors.hpp) for bad input (size mismatch, region out of
// range or repeated, s <= 0, T < 0, bad options), ModelError for an invalid
// circuit, OverflowError if S itself overflows int64 during assembly.
// A t whose radius cannot be brought below target_radius within
// max_prec_bits is kept with its (larger) radius and met_target[t] = 0.
EntropyCurve gaussian_entropy_curve(const Circuit& c, const std::vector<GaussianSite>& init,
                                    const std::vector<std::int64_t>& region, std::int64_t T,
                                    const EntropyOptions& opt = {});

// Working memory (bytes, about) of the curve of a region of `region_size`
// sites of an L-site lattice to T, extrapolated from `probe`, the same curve
// computed to at least t2 (0 <= t1 < t2 <= T), with the same options (used
// by `toral check`).
double gaussian_work_bytes(const EntropyCurve& probe, std::int64_t t1, std::int64_t t2, std::int64_t T,
                           std::size_t region_size, std::int64_t L, const EntropyOptions& opt);

}  // namespace toral
