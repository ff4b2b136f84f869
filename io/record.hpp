// What one sweep point produces, as plain data: the unit that the driver hands
// to io. Every field here maps to a dataset in the documented file layout
// (docs/layout.md). NaN marks "not computed / not applicable".
#pragma once
#include <cstdint>
#include <limits>
#include <string>
#include <vector>

#include "schema.hpp"

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
  DiagnosticFailed = 7,  // a diagnostic failed (e.g. an exact entropy kernel, or a missed certified radius)
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

// Coordinates shared by all points of a run (written once).
struct RunAxes {
  std::vector<std::string> param_names;  // point parameters, /points/<name>
  std::vector<std::string> param_meanings;  // attribute "meaning" of each /points/<name>
  std::vector<std::string> swept;        // names among param_names that take >1 value
  std::vector<std::int64_t> region_sizes;  // /bounds/region_size (ell)
  std::vector<std::int64_t> local_dims;    // /bounds/local_dim (N)
  int hist_bins = 0;
  bool bulk_limit = false;  // whether /limit/ is written
  Schema schema;  // the diagnostics' groups, coordinates and per-point fields (io/schema.hpp)
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

  // The diagnostics' per-point values (driver/diagnostic.hpp), one per field
  // of RunAxes::schema in its order; empty: none computed (all padding).
  std::vector<FieldValue> fields;
};

// Ensemble statistics over points that differ only in their seed (/stats).
struct StatsColumn {
  std::string name;                 // e.g. "lambda_max", "lyapunov_rate"
  std::vector<std::uint64_t> inner;  // trailing shape: {}, {n_ell}, {n_N}, {n_ell, n_N}, or a field's inner shape
  std::vector<std::string> inner_dims;  // the axis (absolute path) of each trailing dim, e.g. /bounds/region_size
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
