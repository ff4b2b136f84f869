// Velocity-dependent Lyapunov exponents of clean circuits, exactly, as a
// diagnostic (driver/diagnostic.hpp): lambda(v) from the Bloch symbol at
// complex momentum (kernels/rays.hpp), the light cone, the butterfly
// velocities, the largest rate and the absolute rate lambda(0). Table [rays]
// (docs/config.md), group /rays (docs/layout.md); padding for circuits that
// are not translation invariant or are redrawn in time (their measured
// lambda(v) is in /spreading).
#include <cmath>
#include <limits>
#include <ostream>

#include "config.hpp"
#include "diagnostic.hpp"
#include "diagnostic_kit.hpp"
#include "rays.hpp"
#include "sweep.hpp"
#include "text_format.hpp"

namespace toral {

namespace {

struct RaysSpec : DiagnosticSpec {
  std::int64_t velocities = 41;  // grid on [-2, 2] sites per period (the same as [spreading]'s default)
  bool momentum = false;         // p perturbations (differs from q for position-class circuits only)
};

const std::string kG = "/rays", kV = "/rays/v";

std::vector<double> grid(const RaysSpec& e) {
  std::vector<double> v;
  for (std::int64_t k = 0; k < e.velocities; ++k)
    v.push_back(-2.0 + 4.0 * static_cast<double>(k) / static_cast<double>(e.velocities - 1));
  return v;
}

const RaysSpec& spec_of(const Config& c);

FieldDecl field(const std::string& name, std::vector<std::string> dims, std::string units, std::string meaning,
                std::string stats = {}) {
  return field_decl(kG + "/" + name, Elem::F64, std::move(dims), {}, std::move(units), std::move(meaning),
                    std::move(stats));
}

// Field order of declare() and compute().
enum Slot : std::size_t {
  kLambda, kLambdaErr, kConeL, kConeR, kBL, kBR, kBErr, kPeak, kPeakErr, kPeakV, kAbs, kAbsErr, kCount
};

class RaysDiagnostic final : public Diagnostic {
 public:
  std::string table() const override { return "rays"; }

  std::shared_ptr<const DiagnosticSpec> parse(const std::string& text, const std::string& source,
                                              const Config&) const override {
    auto e = std::make_shared<RaysSpec>();
    const Ctx cx(source);
    const DiagnosticTable d = read_diagnostic_table(text, source, "rays");
    if (!d.table) return e;
    const std::string P = "rays";
    const toml::table& t = *d.table;
    cx.only_keys(t, P, {"velocities", "component"});
    e->enabled = true;
    if (const toml::node* n = t.get("velocities")) {
      e->velocities = cx.integer(*n, P + ".velocities");
      if (e->velocities < 2 || e->velocities > 100'000)
        cx.fail(*n, P + ".velocities", std::to_string(e->velocities) + " is outside 2..100000");
    }
    if (const toml::node* n = t.get("component")) e->momentum = cx.choice(*n, P + ".component", {"q", "p"}) == "p";
    return e;
  }

  Schema declare(const Config& c) const override {
    const RaysSpec& e = spec_of(c);
    Schema s;
    s.groups.push_back(
        {kG,
         "velocity-dependent Lyapunov exponents lambda(v) of translation-invariant circuits from the Bloch symbol at "
         "complex momentum: the weighted rate Lambda(mu) = max_k ln rho(M(e^(mu+ik))) and its Legendre transform "
         "lambda(v) = min_mu [Lambda(mu) + mu v/2] (kernels/rays.hpp). Asymptotic rates (t -> infinity along rays "
         "x = v t of an infinite chain), not bounds; an open chain of L sites shows them for t < L/|v| and the "
         "absolute rate lambda(0) as t -> infinity. Padding for circuits that are not translation invariant or are "
         "redrawn in time",
         {AttrDecl::of("component", std::string(e.momentum ? "p" : "q"))}});
    s.coords.push_back(value_axis(kV, grid(e), "sites/period", "ray velocity v on [-2, 2] sites per period"));
    s.fields.push_back(field("lyapunov", {kV}, "1/period",
                             "lambda(v): growth rate along the ray x = v t; -inf outside the light cone"));
    s.fields.push_back(field("lyapunov_error", {kV}, "1/period", "estimated absolute error of lambda(v)"));
    s.fields.push_back(field("cone_left", {}, "sites/period",
                             "left edge of the light cone (exact, from the Newton polygon of det(x - M(z)))"));
    s.fields.push_back(field("cone_right", {}, "sites/period", "right edge of the light cone (exact)"));
    s.fields.push_back(field("butterfly_left", {}, "sites/period",
                             "v_B-: the left zero of lambda(v) (the cone's edge when lambda >= 0 there); NaN "
                             "without growth"));
    s.fields.push_back(field("butterfly_right", {}, "sites/period", "v_B+: the right zero of lambda(v)"));
    s.fields.push_back(field("butterfly_error", {}, "sites/period", "estimated absolute error of v_B-+"));
    s.fields.push_back(field("peak", {}, "1/period",
                             "max_v lambda(v) = Lambda(0) = the bulk lambda_max (the rate a region sees while a "
                             "perturbation travels through it: the transient rate of an open chain)",
                             "rays_peak"));
    s.fields.push_back(field("peak_error", {}, "1/period", "estimated absolute error of peak"));
    s.fields.push_back(field("peak_velocity", {}, "sites/period", "the velocity of the peak, -2 Lambda'(0)"));
    s.fields.push_back(field("absolute", {}, "1/period",
                             "lambda(0) = min_mu Lambda(mu): the rate at a fixed site (absolute growth rate), "
                             "the t -> infinity rate of a long open chain",
                             "rays_absolute"));
    s.fields.push_back(field("absolute_error", {}, "1/period", "estimated absolute error of lambda(0)"));
    return s;
  }

  DiagnosticOutput compute(const Config& c, const Point& p, const PointRecord&, MPI_Comm group) const override {
    DiagnosticOutput out;
    int rank = 0;
    MPI_Comm_rank(group, &rank);
    if (rank != 0) return out;
    const RaysSpec& e = spec_of(c);
    try {
      GateSource gs = gate_source(c, p);
      if (!gs.translation_invariant || !gs.time_periodic) return out;  // padding
      gs.L = 2;  // the symbol depends on the gates only: a two-site ring carries them
      gs.boundary = Boundary::Periodic;
      const VelocityExponents r = velocity_exponents(materialize(gs), e.momentum, grid(e));
      out.fields.resize(kCount);
      out.fields[kLambda].shape = {e.velocities};
      out.fields[kLambda].f = r.lambda;
      out.fields[kLambdaErr].shape = {e.velocities};
      out.fields[kLambdaErr].f = r.error;
      out.fields[kConeL] = scalar_value(r.cone_left);
      out.fields[kConeR] = scalar_value(r.cone_right);
      out.fields[kBL] = scalar_value(r.butterfly_left);
      out.fields[kBR] = scalar_value(r.butterfly_right);
      out.fields[kBErr] = scalar_value(r.butterfly_error);
      out.fields[kPeak] = scalar_value(r.peak);
      out.fields[kPeakErr] = scalar_value(r.peak_error);
      out.fields[kPeakV] = scalar_value(r.peak_velocity);
      out.fields[kAbs] = scalar_value(r.absolute);
      out.fields[kAbsErr] = scalar_value(r.absolute_error);
    } catch (const std::exception& ex) {
      out.fields.clear();
      out.failure = ex.what();
    }
    return out;
  }

  DiagnosticEstimate estimate(const Config& c, const Point& p) const override {
    return timed_estimate(*this, c, p, 16.0 * static_cast<double>(spec_of(c).velocities) + 4096.0);
  }

  void print_text(std::ostream& os, const Config& c, const std::vector<FieldValue>& v) const override {
    const RaysSpec& e = spec_of(c);
    if (v.size() < kCount || v[kPeak].empty()) {
      os << "  rays: none (the exact lambda(v) needs translation-invariant gates, the same every period)\n";
      return;
    }
    auto f = [&](Slot s) { return v[s].f.empty() ? std::numeric_limits<double>::quiet_NaN() : v[s].f[0]; };
    os << "  rays (exact lambda(v) of the bulk, " << (e.momentum ? "p" : "q") << " perturbations; rates, not bounds):\n"
       << "    largest " << num(f(kPeak)) << " +- " << num(f(kPeakErr), 2) << " at v = " << num(f(kPeakV), 4)
       << "; at a fixed site lambda(0) = " << num(f(kAbs)) << " +- " << num(f(kAbsErr), 2) << "\n"
       << "    butterfly velocities " << num(f(kBL), 6) << " and " << num(f(kBR), 6) << "; light cone ["
       << num(f(kConeL), 4) << ", " << num(f(kConeR), 4) << "] sites/period\n";
  }
};

const RaysDiagnostic& instance() {
  static const RaysDiagnostic d;
  return d;
}

const RaysSpec& spec_of(const Config& c) { return static_cast<const RaysSpec&>(diagnostic_spec(c, instance())); }

}  // namespace

const Diagnostic& rays_diagnostic() { return instance(); }

}  // namespace toral
