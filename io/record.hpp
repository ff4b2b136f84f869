// What one sweep point produces, as plain data: the unit that the driver hands
// to io. Every field here maps to a dataset in the documented file layout
// (docs/layout.md). NaN marks "not computed / not applicable".
#pragma once
#include <cstdint>
#include <limits>
#include <string>
#include <vector>

namespace toral {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

// Status codes stored in /points/status.
enum class PointStatus : std::int32_t {
  Ok = 0,
  InvalidModel = 1,   // a gate or lattice failed validation at this point
  Overflow = 2,       // exact integer assembly overflowed int64
  SolverFailed = 3,   // the eigen-solver failed or did not converge
  NoMethod = 4,       // no spectrum method applies to this point
  InternalError = 5,  // anything else; see the message
  Pending = 6,        // not computed yet (checkpoint of an unfinished run)
  EntanglementFailed = 7,  // an exact entropy kernel failed or missed its certified radius
  Inaccurate = 8,     // results kept, but an accuracy estimate is not finite or exceeds
                      // spectrum.max_error, or the numbers failed a consistency check
};

// Spectrum-solver codes stored in /chaos/solver/method.
enum class SolverCode : std::int32_t {
  None = 0,
  Lapack = 1,        // dense dgeevx
  BlochExact = 2,    // 2x2 / 4x4 Bloch blocks
  KrylovSchur = 3,   // SLEPc, largest magnitude
  ShiftInvert = 4,   // SLEPc, shift-and-invert with an LU
  Tangent = 5,       // QR (Benettin) method over T periods
};

// Coordinates of the exact entanglement dynamics (/entanglement), shared by
// all points of a run. Regions are fixed site sets; a region that does not fit
// a point's lattice is NaN (cuts -1) there.
struct EntanglementAxes {
  bool present = false;                    // whether /entanglement is written
  std::int64_t periods = 0;                // T: /entanglement/t = 0..T
  std::vector<std::int64_t> region_size;   // |A| per region
  std::vector<std::int64_t> region_sites;  // regions x max |A|, row-major, -1 padded
  bool gaussian = false;                   // whether /entanglement/gaussian is written
  std::vector<std::int64_t> local_dims;    // stabilizer N (empty: no /entanglement/stabilizer)
  std::int64_t profile_stride = 0;         // 0: no stabilizer profile
  std::int64_t profile_sites = 0;          // Lmax + 1: last axis of the profile (cuts x = 0..Lmax)
  std::size_t regions() const { return region_size.size(); }
  std::size_t times() const { return static_cast<std::size_t>(periods + 1); }
  std::size_t profile_times() const {
    return profile_stride > 0 ? static_cast<std::size_t>(periods / profile_stride + 1) : 0;
  }
  bool operator==(const EntanglementAxes&) const = default;
};

// Coordinates shared by all points of a run (written once).
struct RunAxes {
  std::vector<std::string> param_names;  // point parameters, /points/<name>
  std::vector<std::string> param_meanings;  // attribute "meaning" of each /points/<name>
  std::vector<std::string> swept;        // names among param_names that take >1 value
  std::vector<std::int64_t> region_sizes;  // /bounds/region_size (ell)
  std::vector<std::int64_t> local_dims;    // /bounds/local_dim (N)
  int hist_bins = 0;
  bool bulk_limit = false;  // whether /limit/ is written
  EntanglementAxes entanglement;  // /entanglement/ (docs/entanglement.md)
};

// Run-level metadata, written as root attributes.
struct RunMeta {
  std::string toral_version;
  std::string config_text;    // the full TOML text the run used
  std::string config_source;  // file path, or "embedded default"
  std::string created;        // ISO 8601 UTC creation time
  std::int64_t ranks = 1;     // MPI ranks of the run
  std::vector<std::string> sweep_names;  // /points/sweep indexes into this
  std::string config_hash;    // hex FNV-1a-64 of config_text (resume/merge check)
  std::int64_t total_points = 0;  // points of the whole run (a shard holds a subset)
  std::string shard;          // "i/n" for a shard file, "" for a whole run
};

struct PointRecord {
  std::int64_t index = -1;                // global point index (/points/index)
  std::int64_t row = -1;                  // row in this file; -1 means row = index
  std::vector<std::int64_t> params;       // same order as RunAxes::param_names
  std::int32_t status = 0;                // PointStatus
  std::string message;                    // empty when ok
  std::int32_t method = 0;                // Method enum value (0 none, 1 bloch, 2 dense, 3 krylov, 4 tangent)
  double wall_time = kNaN;                // seconds spent on this point

  // /chaos
  double lambda_max = kNaN, ks_rate = kNaN, ks_density = kNaN;
  std::int64_t unstable_count = -1;
  std::int64_t zero_count = -1;           // exponents exactly zero (certified) or within their error of 0
  std::int64_t zero_certified = -1;       // 1 exact (integer polynomial), 0 numerical tolerance, -1 not computed
  std::vector<double> exponents;          // kept exponents, descending
  std::vector<double> exponent_errors;    // per kept exponent (same length), or empty
  double pairing_defect = kNaN, sum_defect = kNaN, error_bound = kNaN;

  // /chaos/solver: diagnostics of the method that produced the spectrum
  std::int32_t solver = 0;                // SolverCode
  std::int64_t solver_converged = -1;     // eigenpairs converged / exponents estimated
  std::int64_t solver_iterations = -1;    // restarts, iterations or periods
  double solver_residual = kNaN;          // largest relative residual ||Ax - mu x|| / |mu|
  double solver_time = kNaN;              // seconds in the solver
  std::int64_t solver_ranks = 1;          // ranks that computed the point
  std::int64_t cluster_count = -1;        // computed values within cluster tolerance of the top
  double cluster_spread = kNaN;           // their spread in exponent
  std::vector<double> hist_counts, hist_edges;  // size bins, bins + 1 (or empty)

  // /limit (bulk L -> infinity), NaN when not translation-invariant
  double limit_lambda_max = kNaN, limit_ks_density = kNaN, limit_accuracy = kNaN;
  std::vector<double> limit_hist_counts, limit_hist_edges;

  // /bounds, row-major over (ell, N) where two axes apply
  std::vector<std::int64_t> cuts;           // [ell] cuts c of the ell-site block (-1: no such block)
  std::vector<double> lyapunov_rate;        // [ell] Lambda_ell: asymptotic growth rate of a generic region (not a bound)
  std::vector<double> hilbert_cap;          // [ell][N] min(ell, L - ell) ln N (a bound)
  std::vector<double> lightcone_rate;       // [ell][N] 2 c_ell ln N (a bound on the growth rate)
  std::vector<double> ehrenfest_time;       // [N]
  std::vector<double> saturation_lyapunov;  // [ell][N] cap / Lambda_ell: a generic region's time (not a bound)
  std::vector<double> saturation_lightcone; // [ell][N] cap / lightcone_rate

  // /entanglement: exact entanglement dynamics (docs/entanglement.md). Every
  // vector is empty when not computed, else of the full length, row-major
  // over ([N], region, t) with N = EntanglementAxes::local_dims, region over
  // its regions and t = 0..T; NaN (int64: -1) where a region does not fit.
  double ent_wall_time = kNaN;                   // seconds in the entanglement kernels
  std::vector<std::int64_t> ent_cuts;            // [region] boundary cuts c of A at this point
  std::vector<double> ent_lyapunov_rate;         // [region] Lambda_|A| (sum of the 2 min(|A|, L-|A|) top exponents):
                                                 //   the asymptotic rate of a generic region, not a bound
  std::vector<double> ent_region_rate;           // [region] late rate of ln vol(P_A S^t) (kernels/region_rate.hpp):
                                                 //   the rate this region's Gaussian entropy reaches
  std::vector<double> gauss_entropy;             // [region][t] midpoint of S_A(t), nats
  std::vector<double> gauss_radius;              // [region][t] certified radius
  std::vector<std::int64_t> gauss_failures;      // [region] t's whose radius missed the target
  std::vector<double> gauss_slope;               // [region] late-time least-squares slope
  std::vector<double> gauss_slope_over_lyapunov; // [region] rate_ratio(slope, Lambda_|A|)
  std::vector<double> gauss_slope_over_region_rate;  // [region] rate_ratio(slope, region rate)
  std::vector<double> gauss_saturation_value;    // [region] max_t S_A(t)
  std::vector<double> gauss_saturation_time;     // [region] first t with S_A(t) >= 0.99 max
  std::vector<double> stab_entropy;              // [N][region][t]
  std::vector<double> stab_slope;                // [N][region]
  std::vector<double> stab_slope_over_lyapunov;  // [N][region]
  std::vector<double> stab_slope_over_lightcone; // [N][region]
  std::vector<double> stab_saturation_value;     // [N][region]
  std::vector<double> stab_saturation_time;      // [N][region]
  std::vector<double> stab_cap;                  // [N][region] min(|A|, L-|A|) ln N
  std::vector<double> stab_lightcone_rate;       // [N][region] 2 c ln N
  std::vector<std::int64_t> stab_violations;     // [N][region] t's above the cap or the light cone
  std::vector<double> stab_profile;              // [N][k][x]: S([0, x)) at t = k*stride, x = 0..L (this point's L)
};

// Ensemble statistics over points that differ only in their seed (/stats).
struct StatsColumn {
  std::string name;                 // e.g. "lambda_max", "lyapunov_rate"
  std::vector<std::uint64_t> inner;  // trailing shape: {}, {n_ell}, {n_N} or {n_ell, n_N}
  std::vector<double> mean, std, sem, median;  // groups x prod(inner), row-major
  std::string units, meaning;
};

struct EnsembleStats {
  std::vector<std::string> param_names;  // the /points parameters except seed
  std::vector<std::int64_t> params;      // groups x param_names, row-major
  std::vector<std::int64_t> count;       // ok points per group
  std::vector<StatsColumn> columns;
  std::int64_t groups() const { return static_cast<std::int64_t>(count.size()); }
};

}  // namespace toral
