// The TOML run configuration: parsed strictly (unknown keys, wrong types and
// empty scans are errors that name the key and its line).
#pragma once
#include <cstdint>
#include <optional>
#include <stdexcept>
#include <string>
#include <vector>

#include "intmat.hpp"
#include "model.hpp"
#include "spectrum.hpp"
#include "diagnostic.hpp"

namespace toral {

// A located configuration error: "SOURCE:LINE: key.path: what is wrong".
struct ConfigError : std::runtime_error {
  using std::runtime_error::runtime_error;
};

// One integer parameter of a gate family.
struct ParamSpec {
  std::string name;                  // "a", "b"
  bool drawn = false;                // drawn per bond/site from [lo, hi]
  std::vector<std::int64_t> values;  // scanned values (size 1 when fixed)
  std::int64_t lo = 0, hi = 0;       // draw range (inclusive)
  std::int64_t line = 0;
};

// A gate: an explicit matrix or a family with parameters.
struct GateSpec {
  bool present = false;
  bool symplectic = false;  // bond gates: 4x4 on (q_a,p_a,q_b,p_b) instead of 2x2 on (q_a,q_b)
  bool explicit_matrix = false;
  Mat2 m2;
  Mat4 m4;
  std::string family;
  std::vector<ParamSpec> params;  // family order
  std::string where;              // "sweep[0].bond"
  bool drawn() const;
};

struct SweepSpec {
  std::string name;
  std::vector<std::int64_t> sites;
  std::int64_t sites_line = 0;
  std::vector<Boundary> boundaries;
  GateSpec bond;
  GateSpec site;  // present == false: no one-site layer
  std::vector<std::int64_t> seeds;  // only when something is drawn
  bool redrawn = false;             // drawn gates redrawn every period (time-random circuit)
  std::string where;
};

// The distributed eigen-solver (SLEPc) for large time-periodic lattices.
struct KrylovSpec {
  std::int64_t count = 16;          // top exponents wanted
  double tolerance = 1e-12;         // relative residual
  std::int64_t max_restarts = 100;
  std::string policy = "auto";      // auto | largest | shift_invert (KrylovPolicy where compute_point builds the options)
  double cluster_tolerance = 1e-6;  // exponent distance from lambda_max counted as one cluster
  std::int64_t ranks_per_point = 0;  // 0: automatic from the matrix dimension
};

// The QR (Benettin) method over T periods, also for gates redrawn in time.
struct TangentSpec {
  std::int64_t count = 8;
  std::int64_t periods = 2000;
  std::int64_t transient = 200;
  std::int64_t windows = 20;
};

// spectrum.method: Auto picks per point (planned_method, driver/compute.cpp);
// the others force that method on every point.
enum class SpectrumMethod { Auto, Bloch, Dense, Krylov, Tangent };

struct SpectrumSpec {
  SpectrumMethod method = SpectrumMethod::Auto;  // auto | bloch | dense | krylov | tangent
  KrylovSpec krylov;
  TangentSpec tangent;
  std::int64_t dense_max = 4096;  // largest matrix dimension for dense
  std::int64_t certify_max = 192;  // dense: largest dimension whose zero exponents are decided exactly
  double max_error = 1e-6;         // accuracy estimates above this give status 8 (inaccurate)
  SummaryOptions summary;
  bool bulk_limit = true;
  std::int64_t method_line = 0;
};

// bounds.placement: regions in the bulk (two cuts) or, on open chains, at an
// end (one cut).
enum class Placement { Bulk, Edge };

struct BoundsSpec {
  std::vector<std::int64_t> regions = {1, 2, 4, 8};
  std::vector<std::int64_t> local_dims = {2, 3, 5, 7};
  Placement placement = Placement::Bulk;  // bulk (two cuts) | edge (open chains: one cut)
};

struct Config {
  std::string text;    // the TOML text as given
  std::string source;  // a path, or "embedded default"
  std::string title;
  std::vector<SweepSpec> sweeps;
  SpectrumSpec spectrum;
  BoundsSpec bounds;
  // The diagnostics' parsed tables, one per registry entry in its order
  // (driver/diagnostic.hpp; diagnostic_spec reads one back).
  std::vector<std::shared_ptr<const DiagnosticSpec>> diagnostics;
};

// The largest lattice size L of any sweep of the config.
std::int64_t largest_lattice(const Config& c);

// Parses and validates; throws ConfigError with a one-line located message.
Config parse_config(const std::string& text, const std::string& source);
// Reads a file (ConfigError when it cannot be read) and parses it.
Config load_config(const std::string& path);

}  // namespace toral
