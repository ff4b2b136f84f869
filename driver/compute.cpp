#include "compute.hpp"

#include <chrono>
#include <cmath>
#include <sstream>

#include <algorithm>

#include "bloch.hpp"
#include "bounds.hpp"
#include "krylov.hpp"
#include "tangent.hpp"

namespace toral {

namespace {
// Exponents closer than this (relative) to lambda_max count as one cluster.
constexpr double kClusterTolerance = 1e-8;

bool translation_invariant_spec(const SweepSpec& s) { return !s.bond.drawn() && !s.site.drawn(); }

std::int64_t dense_dim(const SweepSpec& s, std::int64_t L) {
  const bool pos = !s.bond.symplectic && !s.site.present;
  return pos ? L : 2 * L;
}
}  // namespace

Method planned_method(const Config& c, const Point& p) {
  const SweepSpec& s = c.sweeps[static_cast<std::size_t>(p.sweep)];
  const SpectrumMethod m = c.spectrum.method;
  const bool ti = translation_invariant_spec(s) && p.boundary == Boundary::Periodic;
  if (m == SpectrumMethod::Bloch) return Method::Bloch;
  if (m == SpectrumMethod::Dense) return Method::Dense;
  if (m == SpectrumMethod::Krylov) return Method::Krylov;
  if (m == SpectrumMethod::Tangent) return Method::Tangent;
  if (s.redrawn) return Method::Tangent;
  if (ti) return Method::Bloch;
  if (dense_dim(s, p.L) <= c.spectrum.dense_max) return Method::Dense;
  return Method::Krylov;
}

int ranks_per_point(const Config& c, const std::vector<Point>& points, int world) {
  std::int64_t want = c.spectrum.krylov.ranks_per_point;
  if (want <= 0) {
    std::int64_t dim = 0;
    for (const auto& p : points)
      if (distributed_method(planned_method(c, p)))
        dim = std::max(dim, dense_dim(c.sweeps[static_cast<std::size_t>(p.sweep)], p.L));
    want = std::max<std::int64_t>(1, (dim + 249999) / 250000);
  }
  for (const auto& p : points) want = std::max<std::int64_t>(want, diagnostic_ranks(c, p));
  return static_cast<int>(std::clamp<std::int64_t>(want, 1, world));
}

std::vector<std::int64_t> region_cuts(const Config& c, const Point& p) {
  std::vector<std::int64_t> cuts;
  for (std::int64_t ell : c.bounds.regions)
    cuts.push_back(block_cuts(p.L, p.boundary, c.bounds.placement == Placement::Edge, ell));
  return cuts;
}

double estimated_flops(const Config& c, const Point& p) {
  const SweepSpec& s = c.sweeps[static_cast<std::size_t>(p.sweep)];
  const double n = static_cast<double>(dense_dim(s, p.L));
  switch (planned_method(c, p)) {
    case Method::Bloch:
      return 2000.0 * static_cast<double>(p.L) + (c.spectrum.bulk_limit ? 5e6 : 0.0);
    case Method::Krylov:  // a few hundred sparse products and orthogonalisations
      return 4000.0 * n * static_cast<double>(c.spectrum.krylov.count);
    case Method::Tangent:
      return 20.0 * n * static_cast<double>(c.spectrum.tangent.count * c.spectrum.tangent.count) *
             static_cast<double>(c.spectrum.tangent.periods + c.spectrum.tangent.transient);
    default:
      return 30.0 * n * n * n;  // dgeevx with eigenvectors and condition numbers
  }
}

namespace {

// spectrum.krylov.policy (its TOML spelling, checked by parse_config) as the
// solver's enum: the one place where the driver reads it.
KrylovPolicy krylov_policy(const std::string& toml) {
  if (toml == "auto") return KrylovPolicy::Auto;
  if (toml == "largest") return KrylovPolicy::Largest;
  if (toml == "shift_invert") return KrylovPolicy::ShiftInvert;
  throw std::logic_error("spectrum.krylov.policy \"" + toml + "\" (expected auto, largest or shift_invert)");
}

// Bounds from whatever top of the spectrum is known.
void fill_bounds(PointRecord& r, const Config& c, const Point& p, const std::vector<double>& top, double lambda_max,
                 double ks_rate) {
  BoundsInput bi;
  bi.L = p.L;
  bi.boundary = p.boundary;
  bi.edge = c.bounds.placement == Placement::Edge;
  bi.top = top;
  bi.lambda_max = lambda_max;
  bi.ks_rate = ks_rate;
  const Bounds b = entanglement_bounds(bi, c.bounds.regions, c.bounds.local_dims);
  r.cuts = b.cuts;
  r.lyapunov_rate = b.lyapunov_rate;
  r.hilbert_cap = b.hilbert_cap;
  r.lightcone_rate = b.lightcone_rate;
  r.ehrenfest_time = b.ehrenfest_time;
  r.saturation_lyapunov = b.saturation_lyapunov;
  r.saturation_lightcone = b.saturation_lightcone;
}

// Status 8 (values kept) for accuracy estimates that are not finite or exceed
// spectrum.max_error. The tangent method's error is a statistical estimate
// set by its `periods`, so there only a non-finite one counts.
template <class Fail>
void check_accuracy(const PointRecord& r, double max_error, Fail&& fail) {
  if (r.status != static_cast<std::int32_t>(PointStatus::Ok)) return;
  const bool tangent = r.method == static_cast<std::int32_t>(Method::Tangent);
  auto bad = [&](double v) { return !std::isfinite(v) || (!tangent && v > max_error); };
  auto say = [&](const char* what, double v) {
    std::ostringstream os;
    os << what << " " << v << (std::isfinite(v) ? " exceeds spectrum.max_error = " : " is not finite")
       << (std::isfinite(v) ? std::to_string(max_error) : std::string())
       << "; the values are kept but not trustworthy";
    fail(PointStatus::Inaccurate, os.str());
  };
  if (r.method != 0 && bad(r.error_bound)) return say("/chaos/accuracy/error_bound", r.error_bound);
  if (!std::isnan(r.limit_ks_density) && bad(r.limit_accuracy)) return say("/limit/accuracy", r.limit_accuracy);
}

}  // namespace

PointFailure point_failure(const std::exception& e) {
  if (dynamic_cast<const OverflowError*>(&e)) return {PointStatus::Overflow, e.what()};
  if (dynamic_cast<const InvalidInput*>(&e)) return {PointStatus::InvalidModel, e.what()};
  if (dynamic_cast<const SolverError*>(&e)) return {PointStatus::SolverFailed, std::string("solver: ") + e.what()};
  return {PointStatus::InternalError, std::string("internal error (please report): ") + e.what()};
}

namespace {

void set_failure(PointRecord& r, PointStatus st, const std::string& msg) {
  r.status = static_cast<std::int32_t>(st);
  r.message = msg;
}

// The top exponents of a distributed method and their errors.
struct Top {
  std::vector<double> exponents, errors;
};

// Krylov-Schur / shift-and-invert on the rank group (solvers/krylov.hpp).
Top krylov_spectrum(const Config& c, const GateSource& gs, MPI_Comm group, PointRecord& r) {
  const SpectrumSpec& S = c.spectrum;
  KrylovOptions ko;
  ko.nev = static_cast<int>(S.krylov.count);
  ko.tol = S.krylov.tolerance;
  ko.max_it = static_cast<int>(S.krylov.max_restarts);
  ko.policy = krylov_policy(S.krylov.policy);
  ko.cluster_tol = S.krylov.cluster_tolerance;
  const KrylovResult kr = krylov_top(group, gs, ko);
  r.solver = static_cast<std::int32_t>(kr.method == KrylovMethod::ShiftInvert ? SolverCode::ShiftInvert
                                                                              : SolverCode::KrylovSchur);
  r.solver_converged = kr.converged;
  r.solver_iterations = kr.iterations;
  r.solver_residual = kr.max_residual;
  r.solver_time = kr.wall_seconds;
  r.cluster_count = kr.cluster_count;
  r.cluster_spread = kr.cluster_spread;
  if (!kr.ok) throw SolverError("krylov: " + kr.message);
  return {kr.exponents, kr.residuals};  // first order: a relative residual r moves ln|mu| by about r
}

// The QR (Benettin) method on the rank group (solvers/tangent.hpp).
Top tangent_spectrum(const Config& c, const Point& p, const GateSource& gs, MPI_Comm group, PointRecord& r) {
  const SpectrumSpec& S = c.spectrum;
  TangentOptions to;
  to.k = static_cast<int>(S.tangent.count);
  to.periods = S.tangent.periods;
  to.transient = S.tangent.transient;
  to.windows = static_cast<int>(S.tangent.windows);
  to.seed = p.seed >= 0 ? static_cast<std::uint64_t>(p.seed) : 0;
  const TangentResult tr = tangent_top(group, gs, to);
  r.solver = static_cast<std::int32_t>(SolverCode::Tangent);
  r.solver_converged = static_cast<std::int64_t>(tr.exponents.size());
  r.solver_iterations = tr.periods;
  r.solver_time = tr.wall_seconds;
  if (!tr.ok) throw SolverError("tangent: " + tr.message);
  return {tr.exponents, tr.errors};
}

// A record from the top exponents only: no KS rate, no histogram
// (docs/model.md).
void fill_top(const Config& c, const Point& p, const Top& top, PointRecord& r) {
  r.lambda_max = top.exponents.empty() ? kNaN : top.exponents.front();
  r.exponents = top.exponents;
  r.exponent_errors = top.errors;
  r.error_bound = 0.0;
  for (double e : top.errors) r.error_bound = std::max(r.error_bound, e);
  fill_bounds(r, c, p, top.exponents, r.lambda_max, kNaN);
}

// Why method m cannot solve the materialised circuit ("" when it can).
std::string no_method_reason(const Config& c, const GateSource& gs, const Circuit& circ, Method m) {
  const std::int64_t dim = circ.position_class() ? circ.L : 2 * circ.L;
  if (m != Method::Bloch && m != Method::Dense) return std::string("no single-rank method planned (") + method_name(m) + ")";
  if (m == Method::Bloch && !(circ.translation_invariant() && circ.boundary == Boundary::Periodic))
    return "bloch needs a translation-invariant periodic circuit";
  if (m == Method::Dense && dim > c.spectrum.dense_max)
    return "matrix dimension " + std::to_string(dim) + " exceeds spectrum.dense_max = " +
           std::to_string(c.spectrum.dense_max);
  if (!gs.time_periodic) return "gates redrawn every period have no one-period spectrum; use the tangent method";
  return {};
}

// The whole spectrum on this rank: Bloch blocks or dense LAPACK, with the
// summary, the top cluster and the bounds.
void full_spectrum(const Config& c, const Point& p, const GateSource& gs, Method m, PointRecord& r) {
  const Circuit circ = materialize(gs);
  circ.validate();
  const std::string why = no_method_reason(c, gs, circ, m);
  if (!why.empty()) {
    r.method = 0;
    set_failure(r, PointStatus::NoMethod, "no spectrum method: " + why);
    return;
  }
  const auto ts = std::chrono::steady_clock::now();
  const Spectrum sp = m == Method::Bloch ? bloch_spectrum(circ) : dense_spectrum(circ, c.spectrum.certify_max);
  r.solver_time = std::chrono::duration<double>(std::chrono::steady_clock::now() - ts).count();
  r.solver = static_cast<std::int32_t>(m == Method::Bloch ? SolverCode::BlochExact : SolverCode::Lapack);
  r.solver_converged = static_cast<std::int64_t>(sp.exponents.size());
  r.solver_ranks = 1;
  const ChaosSummary cs = summarize(sp, circ.L, c.spectrum.summary);
  for (std::size_t i = 0; i < cs.kept.size(); ++i)
    r.exponent_errors.push_back(sp.errors.size() == sp.exponents.size() ? sp.errors[i] : sp.error_bound);
  // The top cluster: exponents within the tolerance of lambda_max.
  const double ctol = kClusterTolerance * std::max(1.0, std::fabs(cs.lambda_max));
  r.cluster_count = 0;
  double lowest = cs.lambda_max;
  for (double x : sp.exponents) {
    if (cs.lambda_max - x > ctol) break;
    ++r.cluster_count;
    lowest = x;
  }
  r.cluster_spread = cs.lambda_max - lowest;
  r.lambda_max = cs.lambda_max;
  r.ks_rate = cs.ks_rate;
  r.ks_density = cs.ks_density;
  r.unstable_count = cs.unstable_count;
  r.zero_count = cs.zero_count;
  r.zero_certified = static_cast<std::int64_t>(sp.zero_rule);
  r.exponents = cs.kept;
  if (!sp.warning.empty()) set_failure(r, PointStatus::Inaccurate, "spectrum: " + sp.warning);
  r.pairing_defect = sp.pairing_defect;
  r.sum_defect = sp.sum_defect;
  r.error_bound = sp.error_bound;
  r.hist_counts = cs.hist_counts;
  r.hist_edges = cs.hist_edges;
  fill_bounds(r, c, p, sp.exponents, cs.lambda_max, cs.ks_rate);
}

// The bulk limit L -> infinity: it depends on the gates only, so a two-site
// ring carries them.
void fill_bulk_limit(const Config& c, const GateSource& gs, PointRecord& r) {
  GateSource cell = gs;
  cell.L = 2;
  cell.boundary = Boundary::Periodic;
  const BulkLimit bl = bulk_limit(materialize(cell), c.spectrum.summary.bins);
  r.limit_lambda_max = bl.lambda_max;
  r.limit_ks_density = bl.ks_density;
  r.limit_accuracy = std::max(bl.accuracy, bl.hist_accuracy);
  r.limit_hist_counts = bl.hist_counts;
  r.limit_hist_edges = bl.hist_edges;
}

}  // namespace

// One point: the spectrum by its planned method (distributed ones give the
// top exponents only), the bulk limit, the accuracy check, then the
// diagnostics. A failure becomes the record's status (point_failure).
PointRecord compute_point(const Config& c, const ParamTable& t, const Point& p, MPI_Comm group) {
  const auto t0 = std::chrono::steady_clock::now();
  PointRecord r;
  r.index = p.index;
  r.params = param_values(c, t, p);
  r.cuts = region_cuts(c, p);
  try {
    const GateSource gs = gate_source(c, p);  // large lattices: gates on demand, never a full Circuit on one rank
    const Method m = planned_method(c, p);
    r.method = static_cast<std::int32_t>(m);
    int group_size = 1;
    MPI_Comm_size(group, &group_size);
    r.solver_ranks = group_size;
    if (m == Method::Krylov) fill_top(c, p, krylov_spectrum(c, gs, group, r), r);
    else if (m == Method::Tangent) fill_top(c, p, tangent_spectrum(c, p, gs, group, r), r);
    else full_spectrum(c, p, gs, m, r);
    if (c.spectrum.bulk_limit && gs.translation_invariant && gs.time_periodic) fill_bulk_limit(c, gs, r);
    check_accuracy(r, c.spectrum.max_error,
                   [&](PointStatus st, const std::string& msg) { set_failure(r, st, msg); });
  } catch (const std::exception& e) {
    const PointFailure pf = point_failure(e);
    set_failure(r, pf.status, pf.message);
  }
  // The diagnostics (driver/diagnostics.cpp) after the spectrum: they read
  // the exponents and the bounds.
  compute_diagnostics(c, p, r, group);
  r.wall_time = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  return r;
}

}  // namespace toral
