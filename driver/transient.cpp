// The transient rates of open chains, as a diagnostic (driver/diagnostic.hpp):
// what an open chain shows while perturbations travel through it, beside
// its eigenvalue exponents (what it shows as t -> infinity), and a flag in
// /points when the two differ by more than their accuracy estimates.
//
// On by default for every config with an open-chain sweep (`[transient]
// enabled = false` turns it off); group /transient and /points/transient_differs
// (docs/layout.md), explained in docs/rays.md ("Open chains: the transient
// rate") and docs/bounds.md. Clean circuits (translation-invariant gates
// repeated every period): the bulk rates come exactly from the Bloch symbol
// (kernels/rays.hpp, kernels/bloch.hpp). Disordered or redrawn chains: the
// transient lambda_max is measured from exact integer responses
// (kernels/spreading.hpp, peak_rate); their region rates are not (NaN).
#include <algorithm>
#include <cmath>
#include <limits>
#include <ostream>

#include "bloch.hpp"
#include "bounds.hpp"
#include "config.hpp"
#include "diagnostic.hpp"
#include "diagnostic_kit.hpp"
#include "rays.hpp"
#include "spreading.hpp"
#include "sweep.hpp"
#include "text_format.hpp"

namespace toral {

namespace {

// A peak velocity below this (sites per period) counts as 0: the peak then
// stays in place and the window is unbounded (symmetric gates give exact 0
// up to the rounding of the minimiser).
constexpr double kStillVelocity = 1e-6;

struct TransientSpec : DiagnosticSpec {
  bool measured = false;     // measure also clean chains (a check of the measurement against the exact rate)
  std::int64_t periods = 256;  // the longest measurement window T (chains that are not clean)
  std::int64_t starts = 8;     // perturbed sites k
};

const TransientSpec& spec_of(const Config& c);

const std::string kG = "/transient", kEll = "/transient/region_size", kFlag = "/points/transient_differs";

FieldDecl field(const std::string& name, std::vector<std::string> dims, std::string units, std::string meaning,
                std::string stats = {}) {
  return field_decl(kG + "/" + name, Elem::F64, std::move(dims), {}, std::move(units), std::move(meaning),
                    std::move(stats));
}

// Field order of declare() and compute().
enum Slot : std::size_t {
  kRate, kRateErr, kPeakV, kWindow, kAbs, kAbsErr, kGap, kGapErr, kMethod, kPeriods, kStarts, kRegion, kConv, kCount
};

// The open chain's gates on sites [off, off + W) as an open chain of W sites
// (off even, so the brick-wall layers keep their parity): exactly the
// chain's dynamics for a perturbation whose light cone stays inside.
GateSource window_chain(const GateSource& g, std::int64_t off, std::int64_t W) {
  GateSource w = g;
  w.L = W;
  w.boundary = Boundary::Open;
  w.translation_invariant = false;
  const auto bond = g.bond;
  w.bond = [bond, off](std::int64_t b, std::int64_t t) { return bond(b + off, t); };
  if (g.has_site_layer) {
    const auto site = g.site;
    w.site = [site, off](std::int64_t i, std::int64_t t) { return site(i + off, t); };
  }
  return w;
}

// The transient rate of any open chain, measured (kernels/spreading.hpp,
// peak_rate): the exact integer responses to q perturbations of k sites,
// evenly spread over [2T + 1, L - 2 - 2T], over T = min(periods, (L - 3) / 6)
// periods, so that every light cone (2 sites per period each way) stays
// inside the chain. Each start runs on the window of the chain its light
// cone can reach (exact: the rest of the chain never sees it).
PeakRate measured_rate(const GateSource& g, std::int64_t periods, std::int64_t starts) {
  const std::int64_t T = std::min(periods, (g.L - 3) / 6);
  if (T < 16) {
    PeakRate r;
    r.rate = r.error = r.spread = kNaN;
    r.periods = std::max<std::int64_t>(T, 0);
    return r;
  }
  const std::int64_t lo = 2 * T + 1, hi = g.L - 2 - 2 * T;
  const std::int64_t k = std::min(starts, hi - lo + 1);
  std::vector<std::vector<double>> m;
  for (std::int64_t j = 0; j < k; ++j) {
    const std::int64_t c = k == 1 ? g.L / 2 : lo + (hi - lo) * j / (k - 1);
    std::int64_t off = std::max<std::int64_t>(0, c - 2 * T - 2);
    off -= off % 2;
    const std::int64_t end = std::min(g.L - 1, c + 2 * T + 2);
    m.push_back(profile_peak(spread_profile(window_chain(g, off, end - off + 1), c - off, false, T, 1)));
  }
  return peak_rate(m);
}

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
    cx.only_keys(t, P, {"enabled", "method", "periods", "starts"});
    e->enabled = true;  // the table asks for it, also on a config without open chains (all padding then)
    if (const toml::node* n = t.get("enabled")) e->enabled = cx.boolean(*n, P + ".enabled");
    if (const toml::node* n = t.get("method")) e->measured = cx.choice(*n, P + ".method", {"auto", "measured"}) == "measured";
    if (const toml::node* n = t.get("periods")) {
      e->periods = cx.integer(*n, P + ".periods");
      if (e->periods < 16 || e->periods > 100'000)
        cx.fail(*n, P + ".periods", std::to_string(e->periods) + " is outside 16..100000");
    }
    if (const toml::node* n = t.get("starts")) {
      e->starts = cx.integer(*n, P + ".starts");
      if (e->starts < 1 || e->starts > 1000) cx.fail(*n, P + ".starts", std::to_string(e->starts) + " is outside 1..1000");
    }
    return e;
  }

  Schema declare(const Config& c) const override {
    Schema s;
    s.groups.push_back(
        {kG,
         "open chains: the rates seen while perturbations travel through the chain (t < window), beside the "
         "eigenvalue exponents (t -> infinity) in /chaos. Clean circuits (translation-invariant gates, the same "
         "every period): exact, from the Bloch symbol of the bulk (kernels/rays.hpp); disordered or redrawn chains: "
         "lambda_max measured from exact integer responses (method 2). Rates, not bounds. Padding for rings and for "
         "chains too short to measure (docs/rays.md, 'Open chains: the transient rate')",
         {}});
    s.coords.push_back(int_axis(kEll, c.bounds.regions, "sites",
                                "region size ell (the values of /bounds/region_size): the axis of lyapunov_rate"));
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
    s.fields.push_back(field_decl(kG + "/method", Elem::I64, {}, {}, "1",
                                  "how lambda_max was found: 1 exactly from the Bloch symbol (translation-invariant "
                                  "gates, the same every period), 2 measured (the growth of the largest exact "
                                  "integer response over the second half of a window of measured_periods, averaged "
                                  "over measured_starts sites; disordered or redrawn chains, or method = "
                                  "\"measured\"), -1 none"));
    s.fields.push_back(field_decl(kG + "/measured_periods", Elem::I64, {}, {}, "periods",
                                  "method 2: the window T = min(transient.periods, (L - 3) / 6), so that every "
                                  "start's light cone stays inside the chain; -1 otherwise"));
    s.fields.push_back(field_decl(kG + "/measured_starts", Elem::I64, {}, {}, "1",
                                  "method 2: the perturbed sites, evenly spread over [2T + 1, L - 2 - 2T]; -1 "
                                  "otherwise"));
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
      if (p.boundary != Boundary::Open) return out;
      const double L = static_cast<double>(p.L);
      double rate = kNaN, rate_err = kNaN;
      if (gs.translation_invariant && gs.time_periodic && !spec_of(c).measured) {
        GateSource cell = gs;  // the symbol depends on the gates only: a two-site ring carries them
        cell.L = 2;
        cell.boundary = Boundary::Periodic;
        const VelocityExponents v = velocity_exponents(materialize(cell), false, {0.0});
        const double vstar = std::abs(v.peak_velocity) < kStillVelocity ? 0.0 : v.peak_velocity;
        rate = v.peak;
        rate_err = v.peak_error;
        out.fields[kPeakV] = scalar_value(vstar);
        out.fields[kWindow] =
            scalar_value(vstar == 0.0 ? std::numeric_limits<double>::infinity() : L / std::abs(vstar));
        out.fields[kAbs] = scalar_value(v.absolute);
        out.fields[kAbsErr] = scalar_value(v.absolute_error);
        out.fields[kMethod] = scalar_value(std::int64_t{1});
        out.fields[kPeriods] = scalar_value(std::int64_t{-1});
        out.fields[kStarts] = scalar_value(std::int64_t{-1});
        // Lambda_ell of the ring of the same gates
        const Spectrum sp = twin_ring_spectrum(gs);
        const auto ring_L = static_cast<std::int64_t>(sp.exponents.size() / 2);
        FieldValue& reg = out.fields[kRegion];
        reg.shape = {static_cast<std::int64_t>(c.bounds.regions.size())};
        for (std::int64_t ell : c.bounds.regions)
          reg.f.push_back(ell >= 1 && ell <= p.L - 1 ? lyapunov_rate(sp.exponents, ring_L, ell) : kNaN);
      } else {
        const PeakRate m = measured_rate(gs, spec_of(c).periods, spec_of(c).starts);
        out.fields[kMethod] = scalar_value(std::int64_t{2});
        out.fields[kPeriods] = scalar_value(m.periods);
        out.fields[kStarts] = scalar_value(m.starts);
        if (!std::isfinite(m.rate)) return out;  // too short to measure: the rest is padding
        rate = m.rate;
        rate_err = m.error;
      }
      out.fields[kRate] = scalar_value(rate);
      out.fields[kRateErr] = scalar_value(rate_err);
      if (r.method != 0 && std::isfinite(r.lambda_max)) {
        const double gap = rate - r.lambda_max, err = rate_err + eigen_error(r);
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
    // the ring's exponents and Bloch blocks, or the measured windows' profiles
    const TransientSpec& e = spec_of(c);
    const double window = static_cast<double>(std::min(e.periods, p.L / 6));
    return timed_estimate(*this, c, p,
                          48.0 * static_cast<double>(p.L) + 8.0 * (window + 1) * (4 * window + 5) + 4096.0);
  }

  void print_text(std::ostream& os, const Config& c, const std::vector<FieldValue>& v) const override {
    auto f = [&](Slot s) { return v.size() > s && !v[s].f.empty() ? v[s].f[0] : kNaN; };
    auto n = [&](Slot s) { return v.size() > s && !v[s].i.empty() ? v[s].i[0] : std::int64_t{-1}; };
    if (v.size() < kCount || v[kRate].empty()) {
      if (n(kMethod) == 2)
        os << "  transient: not measured (a window of 16 periods needs L >= 99, so that the light cones stay "
              "inside)\n";
      else
        os << "  transient: none (open chains only)\n";
      return;
    }
    const std::int64_t flag = n(kConv);
    const bool exact = n(kMethod) == 1;
    os << "  transient (open chain; rates, not bounds): while perturbations travel, max_v lambda(v) = " << num(f(kRate))
       << " +- " << num(f(kRateErr), 2);
    if (exact)
      os << " at v = " << num(f(kPeakV), 4) << " for t < " << num(f(kWindow), 6) << " periods;\n";
    else
      os << "\n    (measured: exact responses of " << n(kStarts) << " sites, growth over periods " << n(kPeriods) / 2
         << ".." << n(kPeriods) << ");\n";
    os << "    as t -> infinity the eigenvalues: lambda_max = " << num(f(kRate) - f(kGap));
    if (exact) os << " (tends to lambda(0) = " << num(f(kAbs)) << " as L grows)";
    os << "\n";
    if (flag == 1) {
      os << "    they differ: the eigenvalue lambda_max is below the transient rate by " << num(f(kGap)) << " +- "
         << num(f(kGapErr), 2) << "\n";
      if (exact) {
        const bool moves = f(kRate) - f(kAbs) > f(kRateErr) + f(kAbsErr);
        os << "    " << (moves ? "(convective: the fastest growth travels and leaves through the ends, so longer "
                                 "chains stay below too);"
                               : "(finite size: the fastest growth stays in place, and the eigenvalue lambda_max "
                                 "tends to it as L grows);")
           << "\n";
      }
      os << "    for anything seen before perturbations reach an end use the transient rate (docs/rays.md)\n";
    } else if (flag == 0) {
      os << "    the eigenvalue lambda_max and the transient rate agree within " << num(f(kGapErr), 2) << "\n";
    }
    if (exact) {
      os << "    transient Lambda_ell (ring of the same gates):";
      for (std::size_t k = 0; k < c.bounds.regions.size() && k < v[kRegion].f.size(); ++k)
        os << "  ell = " << c.bounds.regions[k] << ": " << num(v[kRegion].f[k], 6);
      os << "\n";
    }
  }
};

const TransientDiagnostic& instance() {
  static const TransientDiagnostic d;
  return d;
}

const TransientSpec& spec_of(const Config& c) {
  return static_cast<const TransientSpec&>(diagnostic_spec(c, instance()));
}

}  // namespace

const Diagnostic& transient_diagnostic() { return instance(); }

}  // namespace toral
