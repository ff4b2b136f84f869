// Exact entanglement dynamics of a sweep point, end to end: the optional
// [entanglement] config table, the per-point computation with the exact
// kernels (kernels/gaussian_exact.hpp, kernels/stabilizer.hpp), the
// comparison with the bounds, and the human / JSON output of `toral point`.
// docs/entanglement.md is the reference; the file layout is docs/layout.md.
//
// A diagnostic (driver/diagnostic.hpp): its registry line is in
// driver/diagnostics.cpp; this header is for it and for tests.
#pragma once
#include <cstdint>
#include <ostream>
#include <string>
#include <vector>

#include "diagnostic.hpp"
#include "gaussian_exact.hpp"
#include "model.hpp"
#include "record.hpp"
#include "stabilizer.hpp"

namespace toral {

struct Config;
struct Point;

// One region A: a fixed set of sites, ascending and distinct.
struct EntanglementRegion {
  std::vector<std::int64_t> sites;
  bool block = false;      // written as an integer ell: sites offset .. offset + ell - 1
  std::int64_t line = 0;   // where it was given
};

// One [[entanglement.initial]] block: the local state of `sites`.
struct EntanglementInitial {
  std::vector<std::int64_t> sites;
  GaussianSite gaussian;     // vacuum, or squeezed with s = num / den > 0
  StabilizerSite stabilizer; // position, momentum or a line X^a Z^b
  std::int64_t line = 0;
};

struct EntanglementSpec : DiagnosticSpec {
  std::int64_t periods = 0;    // T: curves at t = 0..T
  std::int64_t offset = 0;     // first site of the integer (block) regions
  std::vector<EntanglementRegion> regions;
  bool gaussian = true;        // certified Gaussian entropies on R^{2L}
  std::vector<std::int64_t> stabilizer_dims;  // N of the stabilizer entropies (Z_N qudits)
  bool profile = false;        // stabilizer all-cuts profile S([0, x)), x = 0..L, per N
  std::int64_t profile_stride = 1;
  std::vector<EntanglementInitial> initial;   // sites not covered: vacuum / position
  double radius = 1e-12;                      // certified radius wanted for every Gaussian S_A(t)
  std::int64_t max_precision_bits = 1 << 15;  // root precision the Gaussian kernel may rise to
  std::int64_t rate_window = 1;  // h: the local rate dS_A/dt is (S(t+h) - S(t-h)) / (2h)
};

// The diagnostic itself. Its table: the optional [entanglement]; parse
// throws ConfigError "SOURCE:LINE: entanglement.key: what" (one line) for
// every bad key or value, and for a region or initial site that no lattice
// of the run can hold. compute never throws: a kernel failure, or a
// Gaussian radius that misses its target, is reported as its failure (status
// diagnostic_failed); the other curves are still computed. It uses
// r.exponents (for Lambda_|A|). Points whose gates are redrawn every period
// get NaN curves and region rates (the kernels take one time-periodic
// circuit). Every ratio over a rate follows rate_ratio (kernels/bounds.hpp).
const Diagnostic& entanglement_diagnostic();

// The parsed [entanglement] table of a config.
const EntanglementSpec& entanglement_spec(const Config& c);

// One point's /entanglement values, row-major over ([N], region, t) with N
// over stabilizer_dims, region over the regions and t = 0..T; NaN (int64:
// -1) where a region does not fit. A vector is empty when not computed.
struct EntanglementValues {
  double ent_wall_time = kNaN;                   // seconds in the entanglement kernels
  std::vector<std::int64_t> ent_cuts;            // [region] boundary cuts c of A at this point
  std::vector<double> ent_lyapunov_rate;         // [region] Lambda_|A|: the asymptotic rate of a generic region, not a bound
  std::vector<double> ent_region_rate;           // [region] late rate of ln vol(P_A S^t) (kernels/region_rate.hpp)
  std::vector<double> ent_transient_rate;        // [region] open clean chains: Lambda_|A| of the ring of the same gates
  std::vector<std::int64_t> ent_transient_window;  // [region] periods before the backward light cone reaches an end
  std::vector<double> gauss_entropy;             // [region][t] midpoint of S_A(t), nats
  std::vector<double> gauss_radius;              // [region][t] certified radius
  std::vector<std::int64_t> gauss_failures;      // [region] t's whose radius missed the target
  std::vector<double> gauss_slope;               // [region] late-time least-squares slope
  std::vector<double> gauss_slope_over_lyapunov; // [region] rate_ratio(slope, Lambda_|A|)
  std::vector<double> gauss_slope_over_region_rate;  // [region] rate_ratio(slope, region rate)
  std::vector<double> gauss_slope_over_transient;    // [region] rate_ratio(slope, transient rate)
  std::vector<double> gauss_saturation_value;    // [region] max_t S_A(t)
  std::vector<double> gauss_saturation_time;     // [region] first t with S_A(t) >= 0.99 max
  std::vector<double> gauss_rate;                // [region][t] (S(t+h) - S(t-h)) / (2h), NaN within h of the ends
  std::vector<double> gauss_rate_radius;         // [region][t] (radius(t+h) + radius(t-h)) / (2h)
  std::vector<double> stab_entropy;              // [N][region][t]
  std::vector<double> stab_slope, stab_slope_over_lyapunov, stab_slope_over_lightcone;  // [N][region]
  std::vector<double> stab_slope_over_transient;                                         // [N][region]
  std::vector<double> stab_saturation_value, stab_saturation_time;                      // [N][region]
  std::vector<double> stab_cap, stab_lightcone_rate;  // [N][region] the two bounds
  std::vector<std::int64_t> stab_violations;     // [N][region] t's above a bound (0 by theorem)
  std::vector<double> stab_profile;              // [N][k][x] S([0, x)) at t = k stride, x = 0..L
};

// The /entanglement values of a record of a run of `c` (decoded from
// r.fields; all empty when the record holds none).
EntanglementValues entanglement_values(const Config& c, const PointRecord& r);

// The Gaussian kernel's options from the config (radius, precision limit).
EntropyOptions entropy_options(const EntanglementSpec& E);

// `toral check`: about how long the diagnostic's compute takes for point `p`
// (seconds), and the bytes it needs (its curves in the record plus the
// largest working set of the kernels: stabilizer_work_bytes and
// gaussian_work_bytes), by running the kernels on the point itself for
// short T and extrapolating. A Gaussian curve's per-period cost grows about
// linearly with t (its exact integers do), so T periods cost ~ a T + b T^2,
// fitted through the last two probes of T = 16, 32, 64, ... (they stop once
// one takes half a second or would pass T / 2), and so does the region rate
// (region_rate_work_bytes for its memory); stabilizer curves and
// profiles cost the same every period, so ~ T from a 24-period probe. Runs of
// T <= the probe lengths are timed as they are. All zero without the table.
struct EntanglementEstimate {
  double gaussian_s = 0, stabilizer_s = 0, region_s = 0, bytes = 0;
};
EntanglementEstimate estimate_entanglement(const Config& c, const Point& p);

// ---- pieces, exposed for tests

// Per-site initial states of an L-site lattice from the spec.
std::vector<GaussianSite> gaussian_initial(const EntanglementSpec& e, std::int64_t L);
std::vector<StabilizerSite> stabilizer_initial(const EntanglementSpec& e, std::int64_t L);

// Bonds of the brick-wall with exactly one end in `sites` (bond b joins b and
// b + 1 mod L; L bonds on a ring, L - 1 on an open chain).
std::int64_t boundary_cuts(const std::vector<std::int64_t>& sites, std::int64_t L, Boundary b);

// Late-time slope, saturation value and time of a curve S(t), t = 0..T:
// slope by least squares over t = t0..T, t0 = min(ceil(3T/4), T - 1) (NaN for
// T = 0); value = max_t S(t); time = first t with S(t) >= 0.99 value.
struct CurveSummary {
  double slope = kNaN, saturation_value = kNaN, saturation_time = kNaN;
};
CurveSummary summarize_curve(const double* S, std::size_t n);

// Number of t with S(t) > cap + tol or S(t) - S(0) > rate * t + tol.
std::int64_t bound_violations(const double* S, std::size_t n, double cap, double rate, double tol = 1e-9);

}  // namespace toral
