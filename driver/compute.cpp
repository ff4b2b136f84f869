#include "compute.hpp"

#include <chrono>
#include <cmath>

#include "bloch.hpp"
#include "bounds.hpp"

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

Method choose_method(const Config& c, const Circuit& circ, std::string& why) {
  const std::string& m = c.spectrum.method;
  const bool ti = circ.translation_invariant() && circ.boundary == Boundary::Periodic;
  const std::int64_t dim = circ.position_class() ? circ.L : 2 * circ.L;
  if (m == "bloch" || (m == "auto" && ti)) {
    if (!ti) {
      why = "bloch needs a translation-invariant periodic circuit";
      return Method::None;
    }
    return Method::Bloch;
  }
  if (dim > c.spectrum.dense_max) {
    why = "matrix dimension " + std::to_string(dim) + " exceeds spectrum.dense_max = " +
          std::to_string(c.spectrum.dense_max) +
          (ti ? "" : ", and the circuit is not translation-invariant and periodic (bloch)");
    return Method::None;
  }
  return Method::Dense;
}

int region_cuts(const Config& c, const Point& p) {
  if (p.boundary == Boundary::Open && c.bounds.placement == "edge") return 1;
  return 2;
}

double estimated_flops(const Config& c, const Point& p) {
  const SweepSpec& s = c.sweeps[static_cast<std::size_t>(p.sweep)];
  const bool ti = translation_invariant_spec(s) && p.boundary == Boundary::Periodic;
  if ((c.spectrum.method == "auto" && ti) || c.spectrum.method == "bloch")
    return 2000.0 * static_cast<double>(p.L) + (c.spectrum.bulk_limit ? 5e6 : 0.0);
  const double n = static_cast<double>(dense_dim(s, p.L));
  return 30.0 * n * n * n;  // dgeevx with eigenvectors and condition numbers
}

PointRecord compute_point(const Config& c, const ParamTable& t, const Point& p) {
  const auto t0 = std::chrono::steady_clock::now();
  PointRecord r;
  r.index = p.index;
  r.params = param_values(c, t, p);
  r.cuts = region_cuts(c, p);
  auto fail = [&](PointStatus st, const std::string& msg) {
    r.status = static_cast<std::int32_t>(st);
    r.message = msg;
  };
  try {
    const GateSource gs = gate_source(c, p);
    const Circuit circ = materialize(gs);
    circ.validate();
    std::string why;
    Method m = choose_method(c, circ, why);
    if (!gs.time_periodic) {
      m = Method::None;
      why = "gates redrawn every period have no one-period spectrum; a tangent-space method is needed";
    }
    r.method = static_cast<std::int32_t>(m);
    if (m == Method::None) {
      fail(PointStatus::NoMethod, "no spectrum method: " + why);
    } else {
      const auto ts = std::chrono::steady_clock::now();
      const Spectrum sp = m == Method::Bloch ? bloch_spectrum(circ) : dense_spectrum(circ);
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
      r.exponents = cs.kept;
      r.pairing_defect = sp.pairing_defect;
      r.sum_defect = sp.sum_defect;
      r.error_bound = sp.error_bound;
      r.hist_counts = cs.hist_counts;
      r.hist_edges = cs.hist_edges;
      BoundsInput bi;
      bi.L = circ.L;
      bi.top = sp.exponents;
      bi.lambda_max = cs.lambda_max;
      bi.ks_rate = cs.ks_rate;
      bi.cuts = r.cuts;
      const Bounds b = entanglement_bounds(bi, c.bounds.regions, c.bounds.local_dims);
      r.lyapunov_rate = b.lyapunov_rate;
      r.hilbert_cap = b.hilbert_cap;
      r.lightcone_rate = b.lightcone_rate;
      r.ehrenfest_time = b.ehrenfest_time;
      r.saturation_lyapunov = b.saturation_lyapunov;
      r.saturation_lightcone = b.saturation_lightcone;
    }
    if (c.spectrum.bulk_limit && circ.translation_invariant()) {
      const BulkLimit bl = bulk_limit(circ, c.spectrum.summary.bins);
      r.limit_lambda_max = bl.lambda_max;
      r.limit_ks_density = bl.ks_density;
      r.limit_accuracy = std::max(bl.accuracy, bl.hist_accuracy);
      r.limit_hist_counts = bl.hist_counts;
      r.limit_hist_edges = bl.hist_edges;
    }
  } catch (const OverflowError& e) {
    fail(PointStatus::Overflow, e.what());
  } catch (const ModelError& e) {
    fail(PointStatus::InvalidModel, e.what());
  } catch (const std::exception& e) {
    fail(PointStatus::SolverFailed, std::string("solver: ") + e.what());
  }
  r.wall_time = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  return r;
}

}  // namespace toral
