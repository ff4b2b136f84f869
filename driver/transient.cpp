// The transient rates of open chains, as a diagnostic (driver/diagnostic.hpp):
// what an open chain shows while perturbations travel through it, beside
// its eigenvalue exponents (what it shows as t -> infinity), and a flag in
// /points when the two differ by more than their accuracy estimates.
//
// On by default for every config with an open-chain sweep (`[transient]
// enabled = false` turns it off); group /transient and /points/transient_differs
// (docs/layout.md), explained in docs/rays.md ("Open chains: the transient
// rate") and docs/bounds.md. Clean circuits only (translation-invariant gates
// repeated every period): the bulk rates come exactly from the Bloch symbol
// (kernels/rays.hpp, kernels/bloch.hpp); disordered or redrawn chains are
// padding and flag -1 (their measured lambda(v) is in /spreading).
#include <algorithm>
#include <chrono>
#include <cmath>
#include <limits>
#include <ostream>

#include "bloch.hpp"
#include "bounds.hpp"
#include "config.hpp"
#include "diagnostic.hpp"
#include "diagnostic_kit.hpp"
#include "rays.hpp"
#include "sweep.hpp"
#include "text_format.hpp"

namespace toral {

namespace {

// A peak velocity below this (sites per period) counts as 0: the peak then
// stays in place and the window is unbounded (symmetric gates give exact 0
// up to the rounding of the minimiser).
constexpr double kStillVelocity = 1e-6;

struct TransientSpec : DiagnosticSpec {};

const std::string kG = "/transient", kEll = "/transient/region_size", kFlag = "/points/transient_differs";

FieldDecl field(const std::string& name, std::vector<std::string> dims, std::string units, std::string meaning,
                std::string stats = {}) {
  return field_decl(kG + "/" + name, Elem::F64, std::move(dims), {}, std::move(units), std::move(meaning),
                    std::move(stats));
}

// Field order of declare() and compute().
enum Slot : std::size_t { kRate, kRateErr, kPeakV, kWindow, kAbs, kAbsErr, kGap, kGapErr, kRegion, kConv, kCount };

bool has_open_chain(const Config& c) {
  for (const auto& s : c.sweeps)
    if (std::find(s.boundaries.begin(), s.boundaries.end(), Boundary::Open) != s.boundaries.end()) return true;
  return false;
}

// The eigenvalue lambda_max's accuracy estimate: its own error where the
// method gives one, else the spectrum's error bound; 0 for a certified zero.
double eigen_error(const PointRecord& r) {
  if (r.zero_certified == 1 && r.lambda_max == 0.0) return 0.0;
  if (!r.exponent_errors.empty() && std::isfinite(r.exponent_errors[0])) return r.exponent_errors[0];
  return r.error_bound;
}

class TransientDiagnostic final : public Diagnostic {
 public:
  std::string table() const override { return "transient"; }

  std::shared_ptr<const DiagnosticSpec> parse(const std::string& text, const std::string& source,
                                              const Config& c) const override {
    auto e = std::make_shared<TransientSpec>();
    const Ctx cx(source);
    const DiagnosticTable d = read_diagnostic_table(text, source, "transient");
    e->enabled = has_open_chain(c);
    if (!d.table) return e;
    const std::string P = "transient";
    const toml::table& t = *d.table;
    cx.only_keys(t, P, {"enabled"});
    e->enabled = true;  // the table asks for it, also on a config without open chains (all padding then)
    if (const toml::node* n = t.get("enabled")) e->enabled = cx.boolean(*n, P + ".enabled");
    return e;
  }

  Schema declare(const Config& c) const override {
    Schema s;
    s.groups.push_back(
        {kG,
         "open chains: the rates seen while perturbations travel through the chain (t < window), beside the "
         "eigenvalue exponents (t -> infinity) in /chaos. Clean circuits (translation-invariant gates, the same "
         "every period): exact, from the Bloch symbol of the bulk (kernels/rays.hpp). Rates, not bounds. Padding "
         "for rings and for disordered or redrawn circuits (docs/rays.md, 'Open chains: the transient rate')",
         {}});
    CoordDecl ell;  // the region sizes of [bounds], as /bounds/region_size
    ell.path = kEll;
    ell.type = Elem::I64;
    ell.dims = {kEll};
    ell.i = c.bounds.regions;
    ell.units = "sites";
    ell.meaning = "region size ell (the values of /bounds/region_size): the axis of lyapunov_rate";
    s.coords.push_back(std::move(ell));
    s.fields.push_back(field("lambda_max", {}, "1/period",
                             "the transient rate: max_v lambda(v) = the bulk lambda_max of the same gates, the rate "
                             "along the ray x = peak_velocity t, seen for t < window",
                             "transient_lambda_max"));
    s.fields.push_back(field("lambda_max_error", {}, "1/period", "estimated absolute error of lambda_max"));
    s.fields.push_back(field("peak_velocity", {}, "sites/period",
                             "the velocity of the fastest-growing ray (of q perturbations; p ones travel at minus it)"));
    s.fields.push_back(field("window", {}, "periods",
                             "L / |peak_velocity|: the time the fastest-growing ray takes to cross the chain, before "
                             "which the chain shows lambda_max; +inf when the peak does not move (then the "
                             "eigenvalue lambda_max tends to lambda_max as L grows)"));
    s.fields.push_back(field("absolute", {}, "1/period",
                             "lambda(0): the rate at a fixed site, the limit of the chain's eigenvalue lambda_max as "
                             "L grows (what the chain shows as t -> infinity)",
                             "transient_absolute"));
    s.fields.push_back(field("absolute_error", {}, "1/period", "estimated absolute error of absolute"));
    s.fields.push_back(field("gap", {}, "1/period",
                             "lambda_max - /chaos/lambda_max: how much faster perturbations grow while they travel "
                             "than the chain's eigenvalues say",
                             "transient_gap"));
    s.fields.push_back(field("gap_error", {}, "1/period",
                             "lambda_max_error + the eigenvalue lambda_max's error (its exponent_error, else "
                             "/chaos/accuracy/error_bound; 0 for a certified zero)"));
    s.fields.push_back(field("lyapunov_rate", {kEll}, "nats/period",
                             "transient Lambda_ell: Lambda_ell of the periodic ring of the same gates (L rounded up "
                             "to even; Bloch spectrum), the rate a bulk region of ell sites grows at while its "
                             "backward light cone stays inside the chain; beside /bounds/lyapunov_rate (the "
                             "chain's eigenvalues); a rate, not a bound; NaN for ell outside 1..L-1",
                             "transient_lyapunov_rate"));
    s.fields.push_back(field_decl(kFlag, Elem::I64, {}, {}, "1",
                                  "open chains: 1 when the transient rate /transient/lambda_max and the eigenvalue "
                                  "/chaos/lambda_max differ by more than /transient/gap_error (the eigenvalues miss "
                                  "growth seen while perturbations travel, docs/rays.md), 0 when they "
                                  "agree within it, -1 not determined (rings, disordered or redrawn circuits, no "
                                  "spectrum)"));
    return s;
  }

  DiagnosticOutput compute(const Config& c, const Point& p, const PointRecord& r, MPI_Comm group) const override {
    DiagnosticOutput out;
    int rank = 0;
    MPI_Comm_rank(group, &rank);
    if (rank != 0) return out;
    out.fields.resize(kCount);
    out.fields[kConv] = scalar_value(std::int64_t{-1});
    try {
      GateSource gs = gate_source(c, p);
      if (p.boundary != Boundary::Open || !gs.translation_invariant || !gs.time_periodic) return out;
      GateSource cell = gs;  // the symbol depends on the gates only: a two-site ring carries them
      cell.L = 2;
      cell.boundary = Boundary::Periodic;
      const VelocityExponents v = velocity_exponents(materialize(cell), false, {0.0});
      const double L = static_cast<double>(p.L);
      const double vstar = std::abs(v.peak_velocity) < kStillVelocity ? 0.0 : v.peak_velocity;
      out.fields[kRate] = scalar_value(v.peak);
      out.fields[kRateErr] = scalar_value(v.peak_error);
      out.fields[kPeakV] = scalar_value(vstar);
      out.fields[kWindow] = scalar_value(vstar == 0.0 ? std::numeric_limits<double>::infinity() : L / std::abs(vstar));
      out.fields[kAbs] = scalar_value(v.absolute);
      out.fields[kAbsErr] = scalar_value(v.absolute_error);
      // Lambda_ell of the ring of the same gates (an even number of sites for the brick-wall).
      GateSource ring = gs;
      ring.boundary = Boundary::Periodic;
      ring.L = p.L + (p.L % 2);
      const Spectrum sp = bloch_spectrum(materialize(ring));
      FieldValue& reg = out.fields[kRegion];
      reg.shape = {static_cast<std::int64_t>(c.bounds.regions.size())};
      for (std::int64_t ell : c.bounds.regions)
        reg.f.push_back(ell >= 1 && ell <= p.L - 1 ? lyapunov_rate(sp.exponents, ring.L, ell) : kNaN);
      if (r.method != 0 && std::isfinite(r.lambda_max)) {
        const double gap = v.peak - r.lambda_max, err = v.peak_error + eigen_error(r);
        out.fields[kGap] = scalar_value(gap);
        out.fields[kGapErr] = scalar_value(err);
        if (std::isfinite(err)) out.fields[kConv] = scalar_value(std::int64_t{gap > err ? 1 : 0});
      }
    } catch (const std::exception& ex) {
      out.fields.clear();
      out.failure = ex.what();
    }
    return out;
  }

  DiagnosticEstimate estimate(const Config& c, const Point& p) const override {
    const auto t0 = std::chrono::steady_clock::now();
    (void)compute(c, p, PointRecord{}, MPI_COMM_SELF);
    DiagnosticEstimate d;
    d.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    d.bytes = 48.0 * static_cast<double>(p.L) + 4096.0;  // the ring's exponents and Bloch blocks
    return d;
  }

  void print_text(std::ostream& os, const Config& c, const std::vector<FieldValue>& v) const override {
    if (v.size() < kCount || v[kRate].empty()) {
      os << "  transient: none (an open chain of translation-invariant gates, the same every period, is needed)\n";
      return;
    }
    auto f = [&](Slot s) { return v[s].f.empty() ? kNaN : v[s].f[0]; };
    const std::int64_t flag = v[kConv].i.empty() ? -1 : v[kConv].i[0];
    os << "  transient (open chain; rates, not bounds): while perturbations travel, max_v lambda(v) = "
       << num(f(kRate)) << " +- " << num(f(kRateErr), 2) << " at v = " << num(f(kPeakV), 4) << " for t < "
       << num(f(kWindow), 6) << " periods;\n"
       << "    as t -> infinity the eigenvalues: lambda_max = " << num(f(kRate) - f(kGap)) << " (tends to lambda(0) = "
       << num(f(kAbs)) << " as L grows)\n";
    if (flag == 1) {
      const bool moves = f(kRate) - f(kAbs) > f(kRateErr) + f(kAbsErr);
      os << "    they differ: the eigenvalue lambda_max is below the transient rate by " << num(f(kGap)) << " +- "
         << num(f(kGapErr), 2) << "\n    " << (moves ? "(convective: the fastest growth travels and leaves through the ends, "
                                           "so longer chains stay below too)"
                                         : "(finite size: the fastest growth stays in place, and the eigenvalue "
                                           "lambda_max tends to it as L grows)")
         << ";\n    for anything seen before t ~ window use the transient rate (docs/rays.md)\n";
    }
    else if (flag == 0)
      os << "    the eigenvalue lambda_max and the transient rate agree within " << num(f(kGapErr), 2) << "\n";
    os << "    transient Lambda_ell (ring of the same gates):";
    for (std::size_t k = 0; k < c.bounds.regions.size() && k < v[kRegion].f.size(); ++k)
      os << "  ell = " << c.bounds.regions[k] << ": " << num(v[kRegion].f[k], 6);
    os << "\n";
  }
};

const TransientDiagnostic& instance() {
  static const TransientDiagnostic d;
  return d;
}

}  // namespace

const Diagnostic& transient_diagnostic() { return instance(); }

}  // namespace toral
