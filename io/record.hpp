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
};

// Run-level metadata, written as root attributes.
struct RunMeta {
  std::string toral_version;
  std::string config_text;    // the full TOML text the run used
  std::string config_source;  // file path, or "embedded default"
  std::string created;        // ISO 8601 UTC creation time
  std::int64_t ranks = 1;     // MPI ranks of the run
  std::vector<std::string> sweep_names;  // /points/sweep indexes into this
};

struct PointRecord {
  std::int64_t index = -1;                // global point index, row in every dataset
  std::vector<std::int64_t> params;       // same order as RunAxes::param_names
  std::int32_t status = 0;                // PointStatus
  std::string message;                    // empty when ok
  std::int32_t method = 0;                // Method enum value (0 none, 1 bloch, 2 dense)
  double wall_time = kNaN;                // seconds spent on this point

  // /chaos
  double lambda_max = kNaN, ks_rate = kNaN, ks_density = kNaN;
  std::int64_t unstable_count = -1;
  std::vector<double> exponents;          // kept exponents, descending
  double pairing_defect = kNaN, sum_defect = kNaN, error_bound = kNaN;
  std::vector<double> hist_counts, hist_edges;  // size bins, bins + 1 (or empty)

  // /limit (bulk L -> infinity), NaN when not translation-invariant
  double limit_lambda_max = kNaN, limit_ks_density = kNaN, limit_accuracy = kNaN;
  std::vector<double> limit_hist_counts, limit_hist_edges;

  // /bounds, row-major over (ell, N) where two axes apply
  std::int64_t cuts = -1;
  std::vector<double> lyapunov_rate;        // [ell]
  std::vector<double> hilbert_cap;          // [ell][N]
  std::vector<double> lightcone_rate;       // [N]
  std::vector<double> ehrenfest_time;       // [N]
  std::vector<double> saturation_lyapunov;  // [ell][N]
  std::vector<double> saturation_lightcone; // [ell][N]
};

}  // namespace toral
