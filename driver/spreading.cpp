// Exact spreading of a localised perturbation as a diagnostic
// (driver/diagnostic.hpp): the amplitude profile ln max(|q_i|, |p_i|) of
// S^t e over the lattice at kept times, and the growth rates along rays
// x = start + v t at the last time (kernels/spreading.hpp). Works for every
// circuit: clean or disordered, open or periodic, redrawn in time. With
// starts = n > 1 the propagation is repeated from n starting sites and the
// ray rates are averaged over them with a standard error (different starts
// see different gates in a disordered chain). Table [spreading]
// (docs/config.md), group /spreading (docs/layout.md).
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
#include "stats.hpp"
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
  std::int64_t starts = 1;    // number of starting sites the ray rates are averaged over
};

const std::string kG = "/spreading", kT = "/spreading/t", kSite = "/spreading/site", kV = "/spreading/velocity",
                  kStart = "/spreading/start_index";

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

// The starting sites of a point: the first is `first` (the configured site
// or the centre); the others complete an evenly spaced comb through it on
// the strip of sites m .. L-1-m, read as a ring of W = L - 2m sites:
// m + ((first - m) + round(k W / n)) mod W, k = 1 .. n-1. A ring has m = 0.
// An open chain keeps m = 2T (the light cone's reach at T) from each end,
// so that every ray of a start inside the strip stays in the chain up to T,
// shrunk to floor((L - n) / 2) where the strip would hold fewer than n
// sites. The sites are distinct (n <= L is checked by parse).
std::vector<std::int64_t> start_sites(std::int64_t first, std::int64_t L, Boundary b, std::int64_t T,
                                      std::int64_t n) {
  const std::int64_t m = b == Boundary::Open ? std::min<std::int64_t>(2 * T, (L - n) / 2) : 0;
  const std::int64_t W = L - 2 * m;
  const std::int64_t phase = ((first - m) % W + W) % W;
  std::vector<std::int64_t> s{first};
  for (std::int64_t k = 1; k < n; ++k) s.push_back(m + (phase + (2 * k * W + n) / (2 * n)) % W);
  return s;
}

// The ray rates of one start s, read from the last row of its profile. On an
// open chain as ray_rates does (NaN where the ray leaves the chain). On a
// ring every start is read at the offsets d = x - first of the first start's
// rays that lie in 0..L-1, at site (s + d) mod L, so that all starts cover
// the same rays; n = 1 gives ray_rate itself.
std::vector<double> start_ray_rates(const SpreadProfile& sp, std::int64_t s, std::int64_t first, Boundary b,
                                    const std::vector<double>& v) {
  if (b == Boundary::Open || s == first) return ray_rates(sp, s, v);
  std::vector<double> r(v.size(), std::numeric_limits<double>::quiet_NaN());
  const std::int64_t T = sp.t.back(), L = sp.L;
  const double* last = sp.log_amp.data() + (sp.t.size() - 1) * static_cast<std::size_t>(L);
  for (std::size_t k = 0; k < v.size(); ++k) {
    const double x = std::round(static_cast<double>(first) + v[k] * static_cast<double>(T));
    if (x < 0 || x > static_cast<double>(L - 1)) continue;
    const std::int64_t d = static_cast<std::int64_t>(x) - first;
    r[k] = last[static_cast<std::size_t>(((s + d) % L + L) % L)] / static_cast<double>(T);
  }
  return r;
}

// The largest non-NaN value of a list; NaN when there is none.
double largest(const std::vector<double>& r) {
  double best = std::numeric_limits<double>::quiet_NaN();
  for (double x : r)
    if (!std::isnan(x) && (std::isnan(best) || x > best)) best = x;
  return best;
}

std::int64_t smallest_lattice(const Config& c) {
  std::int64_t m = std::numeric_limits<std::int64_t>::max();
  for (const auto& s : c.sweeps)
    for (std::int64_t L : s.sites) m = std::min(m, L);
  return m;
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
    cx.only_keys(t, P, {"periods", "site", "component", "stride", "velocities", "starts"});
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
    if (const toml::node* n = t.get("starts")) {
      e->starts = cx.integer(*n, P + ".starts");
      if (e->starts < 1 || e->starts > 100'000)
        cx.fail(*n, P + ".starts", std::to_string(e->starts) + " is outside 1..100000");
      if (e->starts > smallest_lattice(c))
        cx.fail(*n, P + ".starts", std::to_string(e->starts) + " starting sites do not fit the smallest lattice (L = " +
                                       std::to_string(smallest_lattice(c)) + ")");
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
    s.coords.push_back(
        int_axis(kT, kept_times(e), "periods", "the kept times of the profile: multiples of the stride, and T"));
    s.coords.push_back(index_axis(kSite, largest_lattice(c), "1", "site index i, 0 .. the largest L of the run"));
    s.coords.push_back(value_axis(kV, velocity_grid(e), "sites/period",
                                  "ray velocity v on [-2, 2], the brick-wall's light cone"));
    s.coords.push_back(index_axis(kStart, e.starts, "1", "index of a starting site, 0 .. starts - 1"));
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
    s.fields.push_back(field("starts", Elem::I64, {kStart}, {}, "1",
                             "the starting sites the ray rates are averaged over; the first is start (docs/config.md, "
                             "[spreading] starts)"));
    s.fields.push_back(field("ray_rate_mean", Elem::F64, {kV}, {}, "1/period",
                             "mean over the starts s of ln a_T(s + v T) / T, over the starts whose ray stays in the "
                             "chain (ray_count); NaN where none does, -inf where one start's amplitude there is 0"));
    s.fields.push_back(field("ray_rate_se", Elem::F64, {kV}, {}, "1/period",
                             "standard error of ray_rate_mean: sample standard deviation (ddof = 1) / sqrt(ray_count); "
                             "NaN where ray_count < 2 or the mean is not finite"));
    s.fields.push_back(field("ray_count", Elem::I64, {kV}, {}, "1",
                             "number of starts whose ray of velocity v stays in the chain up to T"));
    s.fields.push_back(field("max_ray_rate_mean", Elem::F64, {}, {}, "1/period",
                             "mean over the starts of each start's largest ray rate over the velocity grid",
                             "spreading_max_ray_rate_mean"));
    s.fields.push_back(field("max_ray_rate_se", Elem::F64, {}, {}, "1/period",
                             "standard error of max_ray_rate_mean (ddof = 1); NaN for one start"));
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
      // The other starts: only the last row of each profile is needed.
      const std::vector<std::int64_t> starts = start_sites(start, p.L, p.boundary, e.periods, e.starts);
      std::vector<std::vector<double>> rates{rr};
      for (std::size_t k = 1; k < starts.size(); ++k) {
        const SpreadProfile sk = spread_profile(gate_source(c, p), starts[k], e.momentum, e.periods, e.periods);
        rates.push_back(start_ray_rates(sk, starts[k], start, p.boundary, v));
      }
      FieldValue sites, mean, se, count;
      sites.shape = {e.starts};
      sites.i = starts;
      mean.shape = se.shape = count.shape = {e.velocities};
      for (std::size_t j = 0; j < v.size(); ++j) {
        std::vector<double> at_v;
        for (const auto& r : rates)
          if (!std::isnan(r[j])) at_v.push_back(r[j]);
        count.i.push_back(static_cast<std::int64_t>(at_v.size()));
        const SampleStats ss = sample_stats(std::move(at_v));
        mean.f.push_back(ss.mean);
        se.f.push_back(ss.sem);
      }
      std::vector<double> tops;
      for (const auto& r : rates)
        if (const double m = largest(r); !std::isnan(m)) tops.push_back(m);
      const SampleStats top = sample_stats(std::move(tops));
      out.fields = {st, prof, rate, scalar(best), scalar(at), scalar(static_cast<double>(lo - start) / T),
                    scalar(static_cast<double>(hi - start) / T), bits, sites, mean, se, count,
                    scalar(top.mean), scalar(top.sem)};
    } catch (const std::exception& ex) {
      out.failure = ex.what();
    }
    return out;
  }

  DiagnosticEstimate estimate(const Config& c, const Point& p) const override {
    // Entries grow like e^{lambda t}: about lambda T / ln 2 bits on ~min(L, 4T)
    // sites; each period touches every nonzero entry a few times. Probed on
    // the point itself for a short T and scaled by T^2 (work per period grows
    // with the entries' size), the working set by T. The starts are
    // propagated one after the other: n times the time, the same working set
    // (only the first keeps its profile).
    const SpreadingSpec& e = spec_of(c);
    const std::int64_t start = e.site < 0 ? p.L / 2 : e.site;
    DiagnosticEstimate d;
    if (start >= p.L) return d;
    const std::int64_t probe = std::min<std::int64_t>(e.periods, 32);
    const auto t0 = std::chrono::steady_clock::now();
    const SpreadProfile sp = spread_profile(gate_source(c, p), start, e.momentum, probe, probe);
    const double s = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    const double ratio = static_cast<double>(e.periods) / static_cast<double>(probe);
    d.seconds = s * ratio * ratio * static_cast<double>(e.starts);  // one propagation per start
    d.bytes = 2.0 * static_cast<double>(2 * p.L) * (16.0 + static_cast<double>(sp.max_bits) * ratio / 8.0) +
              8.0 * static_cast<double>(kept_times(e).size() * static_cast<std::size_t>(p.L)) +
              8.0 * static_cast<double>(e.starts) * static_cast<double>(e.velocities + 1);
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
    if (e.starts > 1 && v.size() >= 14)
      os << "    over " << e.starts << " starts: mean max ray rate " << num(v[12].f[0]) << " +- " << num(v[13].f[0])
         << " (standard error)\n";
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
