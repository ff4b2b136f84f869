// Exact spreading of a localised perturbation as a diagnostic
// (driver/diagnostic.hpp): the amplitude profile ln max(|q_i|, |p_i|) of
// S^t e over the lattice at kept times, and the growth rates along rays
// x = start + v t at the last time (kernels/spreading.hpp). Works for every
// circuit: clean or disordered, open or periodic, redrawn in time. Table
// [spreading] (docs/config.md), group /spreading (docs/layout.md).
#include <toml++/toml.h>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <limits>
#include <ostream>

#include "config.hpp"
#include "config_ctx.hpp"
#include "diagnostic.hpp"
#include "diagnostic_kit.hpp"
#include "spreading.hpp"
#include "sweep.hpp"
#include "text_format.hpp"

namespace toral {

namespace {

// The brick-wall's light cone: a perturbation moves at most two sites per
// period each way (one even and one odd bond layer).
constexpr double kLightCone = 2.0;

struct SpreadingSpec : DiagnosticSpec {
  std::int64_t periods = 0;   // T
  std::int64_t site = -1;     // the perturbed site; -1: the centre L/2 of each point
  bool momentum = false;      // perturb p instead of q
  std::int64_t stride = 1;    // keep the profile every stride periods (and at T)
  std::int64_t velocities = 41;  // ray grid on [-2, 2] sites per period
};

const std::string kG = "/spreading", kT = "/spreading/t", kSite = "/spreading/site", kV = "/spreading/velocity";

FieldDecl field(const std::string& name, Elem t, std::vector<std::string> dims, std::vector<bool> ragged,
                std::string units, std::string meaning, std::string stats = {}) {
  return field_decl(kG + "/" + name, t, std::move(dims), std::move(ragged), std::move(units), std::move(meaning),
                    std::move(stats));
}

std::vector<std::int64_t> kept_times(const SpreadingSpec& e) {
  std::vector<std::int64_t> t;
  for (std::int64_t k = 0; k <= e.periods; k += e.stride) t.push_back(k);
  if (t.back() != e.periods) t.push_back(e.periods);
  return t;
}

std::vector<double> velocity_grid(const SpreadingSpec& e) {
  std::vector<double> v;
  for (std::int64_t k = 0; k < e.velocities; ++k)
    v.push_back(-kLightCone + 2.0 * kLightCone * static_cast<double>(k) / static_cast<double>(e.velocities - 1));
  return v;
}

const SpreadingSpec& spec_of(const Config& c);

class SpreadingDiagnostic final : public Diagnostic {
 public:
  std::string table() const override { return "spreading"; }

  std::shared_ptr<const DiagnosticSpec> parse(const std::string& text, const std::string& source,
                                              const Config& c) const override {
    auto e = std::make_shared<SpreadingSpec>();
    const Ctx cx(source);
    const DiagnosticTable d = read_diagnostic_table(text, source, "spreading");
    if (!d.table) return e;
    const std::string P = "spreading";
    const toml::table& t = *d.table;
    cx.only_keys(t, P, {"periods", "site", "component", "stride", "velocities"});
    e->enabled = true;
    const toml::node* per = t.get("periods");
    if (!per) cx.fail(d.line, P, "missing 'periods' (the number T of periods to propagate)");
    e->periods = cx.integer(*per, P + ".periods");
    if (e->periods < 1 || e->periods > 1'000'000)
      cx.fail(*per, P + ".periods", "T = " + std::to_string(e->periods) + " is outside 1..10^6");
    e->stride = std::max<std::int64_t>(1, (e->periods + 63) / 64);  // at most 65 kept times by default
    if (const toml::node* n = t.get("stride")) {
      e->stride = cx.integer(*n, P + ".stride");
      if (e->stride < 1 || e->stride > e->periods)
        cx.fail(*n, P + ".stride", std::to_string(e->stride) + " is outside 1..periods");
    }
    if (const toml::node* n = t.get("site")) {
      if (n->is_string()) {
        if (cx.string(*n, P + ".site") != "center")
          cx.fail(*n, P + ".site", "must be a site index >= 0 or \"center\"");
      } else {
        e->site = cx.integer(*n, P + ".site");
        if (e->site < 0) cx.fail(*n, P + ".site", "must be >= 0");
        if (e->site >= largest_lattice(c))
          cx.fail(*n, P + ".site", "site " + std::to_string(e->site) + " is beyond every lattice (largest L = " +
                                       std::to_string(largest_lattice(c)) + ")");
      }
    }
    if (const toml::node* n = t.get("component")) e->momentum = cx.choice(*n, P + ".component", {"q", "p"}) == "p";
    if (const toml::node* n = t.get("velocities")) {
      e->velocities = cx.integer(*n, P + ".velocities");
      if (e->velocities < 2 || e->velocities > 100'000)
        cx.fail(*n, P + ".velocities", std::to_string(e->velocities) + " is outside 2..100000");
    }
    return e;
  }

  Schema declare(const Config& c) const override {
    const SpreadingSpec& e = spec_of(c);
    Schema s;
    s.groups.push_back({kG,
                        "exact spreading of a localised perturbation e (one coordinate of one site): x_t = S^t e "
                        "in exact integers (kernels/spreading.hpp); its amplitude profile and its growth rates along "
                        "rays x = start + v t at t = T, finite-time estimates of the velocity-dependent Lyapunov "
                        "exponent (rates, not bounds: the finite-t correction is of order ln T / T)",
                        {AttrDecl::of("component", std::string(e.momentum ? "p" : "q")),
                         AttrDecl::of("light_cone_velocity", kLightCone)}});
    CoordDecl t;
    t.path = kT;
    t.type = Elem::I64;
    t.dims = {kT};
    t.i = kept_times(e);
    t.units = "periods";
    t.meaning = "the kept times of the profile: multiples of the stride, and T";
    s.coords.push_back(std::move(t));
    s.coords.push_back(index_axis(kSite, largest_lattice(c), "1", "site index i, 0 .. the largest L of the run"));
    s.coords.push_back(value_axis(kV, velocity_grid(e), "sites/period",
                                  "ray velocity v on [-2, 2], the brick-wall's light cone"));
    s.fields.push_back(field("start", Elem::I64, {}, {}, "1", "the perturbed site of the point"));
    s.fields.push_back(field("log_amplitude", Elem::F64, {kT, kSite}, {false, true}, "1",
                             "ln max(|q_i|, |p_i|) of x_t at site i (exact integers, rounded once to double); -inf "
                             "where both are 0 (outside the light cone); NaN beyond the point's L"));
    s.fields.push_back(field("ray_rate", Elem::F64, {kV}, {false}, "1/period",
                             "ln a_T(start + v T) / T: the growth rate along the ray of velocity v at time T; NaN "
                             "where the ray has left an open chain, -inf outside the light cone"));
    s.fields.push_back(field("max_ray_rate", Elem::F64, {}, {}, "1/period",
                             "largest ray_rate over the velocity grid", "spreading_max_ray_rate"));
    s.fields.push_back(field("max_ray_velocity", Elem::F64, {}, {}, "sites/period", "the velocity of max_ray_rate"));
    s.fields.push_back(field("front_left", Elem::F64, {}, {}, "sites/period",
                             "(leftmost site with a nonzero amplitude at T - start) / T: the support's left edge"));
    s.fields.push_back(field("front_right", Elem::F64, {}, {}, "sites/period",
                             "(rightmost site with a nonzero amplitude at T - start) / T"));
    s.fields.push_back(field("max_bits", Elem::I64, {}, {}, "bits", "largest entry of x_T in bits"));
    return s;
  }

  DiagnosticOutput compute(const Config& c, const Point& p, const PointRecord&, MPI_Comm group) const override {
    DiagnosticOutput out;
    int rank = 0;
    MPI_Comm_rank(group, &rank);
    if (rank != 0) return out;
    const SpreadingSpec& e = spec_of(c);
    const std::int64_t start = e.site < 0 ? p.L / 2 : e.site;
    if (start >= p.L) return out;  // the site does not fit this lattice: padding
    try {
      const SpreadProfile sp = spread_profile(gate_source(c, p), start, e.momentum, e.periods, e.stride);
      const std::vector<double> v = velocity_grid(e);
      const std::vector<double> rr = ray_rates(sp, start, v);
      double best = -std::numeric_limits<double>::infinity(), at = std::numeric_limits<double>::quiet_NaN();
      for (std::size_t k = 0; k < rr.size(); ++k)
        if (!std::isnan(rr[k]) && rr[k] > best) best = rr[k], at = v[k];
      const double* last = sp.log_amp.data() + (sp.t.size() - 1) * static_cast<std::size_t>(sp.L);
      std::int64_t lo = -1, hi = -1;
      for (std::int64_t i = 0; i < sp.L; ++i)
        if (last[i] != -std::numeric_limits<double>::infinity()) {
          if (lo < 0) lo = i;
          hi = i;
        }
      const double T = static_cast<double>(e.periods);
      const auto scalar = [](double x) { return scalar_value(x); };
      FieldValue st, prof, rate, bits;
      st.i = {start};
      prof.shape = {static_cast<std::int64_t>(sp.t.size()), sp.L};
      prof.f = sp.log_amp;
      rate.shape = {e.velocities};
      rate.f = rr;
      bits.i = {sp.max_bits};
      out.fields = {st, prof, rate, scalar(best), scalar(at), scalar(static_cast<double>(lo - start) / T),
                    scalar(static_cast<double>(hi - start) / T), bits};
    } catch (const std::exception& ex) {
      out.failure = ex.what();
    }
    return out;
  }

  DiagnosticEstimate estimate(const Config& c, const Point& p) const override {
    // Entries grow like e^{lambda t}: about lambda T / ln 2 bits on ~min(L, 4T)
    // sites; each period touches every nonzero entry a few times. Probed on
    // the point itself for a short T and scaled by T^2 (work per period grows
    // with the entries' size), the working set by T.
    const SpreadingSpec& e = spec_of(c);
    const std::int64_t start = e.site < 0 ? p.L / 2 : e.site;
    DiagnosticEstimate d;
    if (start >= p.L) return d;
    const std::int64_t probe = std::min<std::int64_t>(e.periods, 32);
    const auto t0 = std::chrono::steady_clock::now();
    const SpreadProfile sp = spread_profile(gate_source(c, p), start, e.momentum, probe, probe);
    const double s = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    const double ratio = static_cast<double>(e.periods) / static_cast<double>(probe);
    d.seconds = s * ratio * ratio;
    d.bytes = 2.0 * static_cast<double>(2 * p.L) * (16.0 + static_cast<double>(sp.max_bits) * ratio / 8.0) +
              8.0 * static_cast<double>(kept_times(e).size() * static_cast<std::size_t>(p.L));
    return d;
  }

  void print_text(std::ostream& os, const Config& c, const std::vector<FieldValue>& v) const override {
    const SpreadingSpec& e = spec_of(c);
    if (v.size() < 8 || v[0].empty()) {
      os << "  spreading: none (the perturbed site does not fit this lattice)\n";
      return;
    }
    os << "  spreading of a " << (e.momentum ? "p" : "q") << " perturbation at site " << v[0].i[0] << " over T = "
       << e.periods << " periods (rates along rays at T, not bounds):\n"
       << "    max ray rate " << num(v[3].f[0]) << " at v = " << num(v[4].f[0], 4) << " sites/period; support "
       << "edges at v = " << num(v[5].f[0], 4) << " and " << num(v[6].f[0], 4) << "; largest entry " << v[7].i[0]
       << " bits\n";
  }
};

const SpreadingDiagnostic& instance() {
  static const SpreadingDiagnostic d;
  return d;
}

const SpreadingSpec& spec_of(const Config& c) {
  return static_cast<const SpreadingSpec&>(diagnostic_spec(c, instance()));
}

}  // namespace

const Diagnostic& spreading_diagnostic() { return instance(); }

}  // namespace toral
