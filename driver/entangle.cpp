#include "entangle.hpp"

#include "config_ctx.hpp"
#include "text_format.hpp"

#include <toml++/toml.h>

#include <algorithm>
#include <charconv>
#include <chrono>
#include <cmath>
#include <iomanip>
#include <numeric>
#include <set>
#include <sstream>

#include "bounds.hpp"
#include "config.hpp"
#include "region_rate.hpp"
#include "sweep.hpp"

namespace toral {

namespace {

constexpr std::int64_t kMaxPeriods = 10'000'000;
constexpr double kSaturationFraction = 0.99;
constexpr double kViolationTolerance = 1e-9;

using Loc = Ctx;  // located TOML reading shared with config.cpp (config_ctx.hpp)

std::string range_text(const std::vector<std::int64_t>& sites) {
  if (sites.empty()) return "{}";
  bool contiguous = true;
  for (std::size_t i = 1; i < sites.size(); ++i) contiguous = contiguous && sites[i] == sites[i - 1] + 1;
  if (contiguous && sites.size() > 2)
    return std::to_string(sites.front()) + ".." + std::to_string(sites.back());
  std::string s = "{";
  for (std::size_t i = 0; i < sites.size(); ++i) s += (i ? ", " : "") + std::to_string(sites[i]);
  return s + "}";
}

// "3/2", "-1/4", "7": a rational p/q with q > 0; false when malformed.
bool parse_rational(const std::string& s, std::int64_t& num, std::int64_t& den) {
  const std::size_t slash = s.find('/');
  auto whole = [](std::string_view v, std::int64_t& out) {
    if (v.empty()) return false;
    const char* b = v.data();
    if (*b == '+') ++b;
    const auto [p, ec] = std::from_chars(b, v.data() + v.size(), out);
    return ec == std::errc() && p == v.data() + v.size();
  };
  const std::string_view sv(s);
  if (slash == std::string::npos) {
    den = 1;
    return whole(sv, num);
  }
  return whole(sv.substr(0, slash), num) && whole(sv.substr(slash + 1), den) && den > 0;
}

std::int64_t max_sites(const Config& c) {
  std::int64_t m = 0;
  for (const auto& s : c.sweeps)
    for (std::int64_t L : s.sites) m = std::max(m, L);
  return m;
}

}  // namespace

// ---------------------------------------------------------------- config

EntanglementSpec parse_entanglement(const std::string& text, const std::string& source, const Config& c) {
  EntanglementSpec e;
  const Loc cx(source);
  toml::table root;
  try {
    root = toml::parse(text, source);
  } catch (const toml::parse_error& err) {  // parse_config has reported syntax errors already
    cx.fail(static_cast<std::int64_t>(err.source().begin.line), "", std::string("TOML syntax: ") +
                                                                       std::string(err.description()));
  }
  const toml::node* node = root.get("entanglement");
  if (!node) return e;
  const std::string P = "entanglement";
  if (!node->is_table()) cx.fail(*node, P, std::string("must be a table, not ") + Loc::type_name(*node));
  const toml::table& t = *node->as_table();
  const std::int64_t tline = Loc::line(*node);
  cx.only_keys(t, P, {"periods", "regions", "offset", "gaussian", "stabilizer_dims", "profile", "profile_stride",
                      "initial", "radius", "max_precision_bits"});
  e.enabled = true;
  const std::int64_t Lmax = max_sites(c);

  const toml::node* per = t.get("periods");
  if (!per) cx.fail(tline, P, "missing 'periods' (the number T of periods; curves at t = 0..T)");
  e.periods = cx.integer(*per, P + ".periods");
  if (e.periods < 0 || e.periods > kMaxPeriods)
    cx.fail(*per, P + ".periods", "T = " + std::to_string(e.periods) + " is outside 0..10^7");

  if (const toml::node* o = t.get("offset")) {
    e.offset = cx.integer(*o, P + ".offset");
    if (e.offset < 0) cx.fail(*o, P + ".offset", "must be >= 0 (a site index)");
  }
  if (const toml::node* g = t.get("gaussian")) e.gaussian = cx.boolean(*g, P + ".gaussian");

  if (const toml::node* d = t.get("stabilizer_dims")) {
    if (d->is_array() && d->as_array()->empty()) {
      // an explicit empty list: no stabilizer curves
    } else {
      e.stabilizer_dims = cx.int_values(*d, P + ".stabilizer_dims");
    }
    std::set<std::int64_t> seen;
    for (std::int64_t N : e.stabilizer_dims) {
      std::string why;
      if (!stabilizer_dimension_supported(N, why))
        cx.fail(*d, P + ".stabilizer_dims", "N = " + std::to_string(N) + " is not supported: " + why);
      if (!seen.insert(N).second) cx.fail(*d, P + ".stabilizer_dims", "N = " + std::to_string(N) + " is listed twice");
    }
  }
  if (const toml::node* pr = t.get("profile")) {
    e.profile = cx.boolean(*pr, P + ".profile");
    if (e.profile && e.stabilizer_dims.empty())
      cx.fail(*pr, P + ".profile", "the profile is a stabilizer quantity: it needs stabilizer_dims");
  }
  if (const toml::node* st = t.get("profile_stride")) {
    e.profile_stride = cx.integer(*st, P + ".profile_stride");
    if (!e.profile) cx.fail(*st, P + ".profile_stride", "given but profile is not true");
    if (e.profile_stride < 1) cx.fail(*st, P + ".profile_stride", "must be at least 1");
  }
  if (!e.gaussian && e.stabilizer_dims.empty())
    cx.fail(tline, P, "nothing to compute: gaussian is false and stabilizer_dims is empty");
  if (const toml::node* rr = t.get("radius")) {
    if (!rr->is_number()) cx.fail(*rr, P + ".radius", std::string("must be a number, not ") + Loc::type_name(*rr));
    e.radius = rr->is_integer() ? static_cast<double>(rr->as_integer()->get()) : rr->as_floating_point()->get();
    if (!(e.radius > 0 && e.radius <= 1e-3)) cx.fail(*rr, P + ".radius", "must be in (0, 1e-3] nats");
  }
  if (const toml::node* mp = t.get("max_precision_bits")) {
    e.max_precision_bits = cx.integer(*mp, P + ".max_precision_bits");
    if (e.max_precision_bits < 64 || e.max_precision_bits > (std::int64_t{1} << 20))
      cx.fail(*mp, P + ".max_precision_bits", "must be in 64..1048576");
  }

  // ---- regions
  const toml::node* rg = t.get("regions");
  if (!rg) cx.fail(tline, P, "missing 'regions' (a list of block sizes ell and/or site lists)");
  if (!rg->is_array())
    cx.fail(*rg, P + ".regions",
            std::string("must be a list of block sizes ell and/or site lists, not ") + Loc::type_name(*rg));
  const auto& ra = *rg->as_array();
  if (ra.empty() && !e.profile) cx.fail(*rg, P + ".regions", "empty: give at least one region (or profile = true)");
  for (std::size_t i = 0; i < ra.size(); ++i) {
    const std::string key = P + ".regions[" + std::to_string(i) + "]";
    const toml::node& n = ra[i];
    EntanglementRegion reg;
    reg.line = Loc::line(n);
    if (n.is_integer()) {
      const std::int64_t ell = n.as_integer()->get();
      if (ell < 1) cx.fail(n, key, "block size " + std::to_string(ell) + " is below 1");
      if (ell > kMaxScan) cx.fail(n, key, "block size " + std::to_string(ell) + " is above 10^7");
      reg.block = true;
      for (std::int64_t s = 0; s < ell; ++s) reg.sites.push_back(e.offset + s);
    } else if (n.is_array()) {
      if (n.as_array()->empty()) cx.fail(n, key, "empty site list");
      for (const auto& s : *n.as_array()) {
        const std::int64_t v = cx.integer(s, key);
        if (v < 0) cx.fail(s, key, "site " + std::to_string(v) + " is negative");
        reg.sites.push_back(v);
      }
      std::sort(reg.sites.begin(), reg.sites.end());
      const auto dup = std::adjacent_find(reg.sites.begin(), reg.sites.end());
      if (dup != reg.sites.end()) cx.fail(n, key, "site " + std::to_string(*dup) + " is listed twice");
    } else {
      cx.fail(n, key, std::string("must be a block size ell (an integer) or a list of sites, not ") +
                          Loc::type_name(n));
    }
    const std::int64_t need = reg.sites.back() + 1;
    if (need > Lmax)
      cx.fail(n, key,
              "sites " + range_text(reg.sites) + " need L >= " + std::to_string(need) +
                  ", but no lattice of the run is that large (largest L = " + std::to_string(Lmax) + ")");
    e.regions.push_back(std::move(reg));
  }

  // ---- [[entanglement.initial]]
  if (const toml::node* in = t.get("initial")) {
    if (!in->is_array_of_tables())
      cx.fail(*in, P + ".initial", "must be an array of tables: write [[entanglement.initial]]");
    std::vector<std::int64_t> owner;  // site -> block index + 1
    const auto& arr = *in->as_array();
    for (std::size_t i = 0; i < arr.size(); ++i) {
      const std::string key = P + ".initial[" + std::to_string(i) + "]";
      const toml::table& b = *arr[i].as_table();
      EntanglementInitial blk;
      blk.line = Loc::line(arr[i]);
      cx.only_keys(b, key, {"sites", "gaussian", "squeeze", "stabilizer"});
      const toml::node* sn = b.get("sites");
      if (!sn) cx.fail(blk.line, key, "missing 'sites' (an integer, a list or a range {from, to})");
      blk.sites = cx.int_values(*sn, key + ".sites");
      for (std::int64_t s : blk.sites) {
        if (s < 0) cx.fail(*sn, key + ".sites", "site " + std::to_string(s) + " is negative");
        if (s >= Lmax)
          cx.fail(*sn, key + ".sites",
                  "site " + std::to_string(s) + " is beyond every lattice of the run (largest L = " +
                      std::to_string(Lmax) + ")");
        if (owner.size() <= static_cast<std::size_t>(s)) owner.resize(static_cast<std::size_t>(s) + 1, 0);
        std::int64_t& o = owner[static_cast<std::size_t>(s)];
        if (o != 0)
          cx.fail(*sn, key + ".sites",
                  "site " + std::to_string(s) + " is already set by " + P + ".initial[" + std::to_string(o - 1) + "]");
        o = static_cast<std::int64_t>(i) + 1;
      }
      std::string gkind = "vacuum";
      if (const toml::node* g = b.get("gaussian")) {
        gkind = cx.string(*g, key + ".gaussian");
        if (gkind != "vacuum" && gkind != "squeezed")
          cx.fail(*g, key + ".gaussian", "\"" + gkind + "\" is not one of \"vacuum\", \"squeezed\"");
      }
      const toml::node* sq = b.get("squeeze");
      if (gkind == "squeezed") {
        if (!sq) cx.fail(blk.line, key, "gaussian = \"squeezed\" needs 'squeeze' (s > 0, e.g. \"3/2\" or 2)");
        std::int64_t num = 0, den = 1;
        if (sq->is_integer()) {
          num = sq->as_integer()->get();
        } else if (sq->is_string()) {
          if (!parse_rational(sq->as_string()->get(), num, den))
            cx.fail(*sq, key + ".squeeze",
                    "\"" + sq->as_string()->get() + "\" is not a rational p/q of integers (e.g. \"3/2\")");
        } else {
          cx.fail(*sq, key + ".squeeze",
                  std::string("must be a rational string like \"3/2\" or an integer, not ") + Loc::type_name(*sq) +
                      " (exact arithmetic: no floats)");
        }
        if (num <= 0) cx.fail(*sq, key + ".squeeze", "the squeezing s must be > 0");
        const std::int64_t g = std::gcd(num, den);
        blk.gaussian.squeezed = true;
        blk.gaussian.num = num / g;
        blk.gaussian.den = den / g;
      } else if (sq) {
        cx.fail(*sq, key + ".squeeze", "given but gaussian is not \"squeezed\"");
      }
      if (const toml::node* sb = b.get("stabilizer")) {
        if (sb->is_string()) {
          const std::string k = sb->as_string()->get();
          if (k == "position")
            blk.stabilizer = StabilizerSite::position();
          else if (k == "momentum")
            blk.stabilizer = StabilizerSite::momentum();
          else
            cx.fail(*sb, key + ".stabilizer", "\"" + k + "\" is not one of \"position\", \"momentum\" or [a, b]");
        } else if (sb->is_array()) {
          const auto& ab = *sb->as_array();
          if (ab.size() != 2)
            cx.fail(*sb, key + ".stabilizer", "a line must be [a, b]: the generator X^a Z^b (two integers)");
          blk.stabilizer = StabilizerSite::line(cx.integer(ab[0], key + ".stabilizer"),
                                                cx.integer(ab[1], key + ".stabilizer"));
          for (std::int64_t N : e.stabilizer_dims) {
            std::string why;
            if (!stabilizer_site_valid(N, blk.stabilizer, why))
              cx.fail(*sb, key + ".stabilizer", "not a valid state for N = " + std::to_string(N) + ": " + why);
          }
        } else {
          cx.fail(*sb, key + ".stabilizer",
                  std::string("must be \"position\", \"momentum\" or [a, b], not ") + Loc::type_name(*sb));
        }
      }
      e.initial.push_back(std::move(blk));
    }
  }
  return e;
}

EntanglementAxes entanglement_axes(const Config& c) {
  EntanglementAxes a;
  const EntanglementSpec& e = c.entanglement;
  if (!e.enabled) return a;
  a.present = true;
  a.periods = e.periods;
  std::size_t width = 0;
  for (const auto& r : e.regions) {
    a.region_size.push_back(static_cast<std::int64_t>(r.sites.size()));
    width = std::max(width, r.sites.size());
  }
  a.region_sites.assign(e.regions.size() * width, -1);
  for (std::size_t i = 0; i < e.regions.size(); ++i)
    std::copy(e.regions[i].sites.begin(), e.regions[i].sites.end(),
              a.region_sites.begin() + static_cast<std::ptrdiff_t>(i * width));
  a.gaussian = e.gaussian;
  a.local_dims = e.stabilizer_dims;
  if (e.profile) {
    a.profile_stride = e.profile_stride;
    a.profile_sites = max_sites(c) + 1;
  }
  return a;
}

// ---------------------------------------------------------------- pieces

std::vector<GaussianSite> gaussian_initial(const EntanglementSpec& e, std::int64_t L) {
  std::vector<GaussianSite> v(static_cast<std::size_t>(L));
  for (const auto& b : e.initial)
    for (std::int64_t s : b.sites)
      if (s < L) v[static_cast<std::size_t>(s)] = b.gaussian;
  return v;
}

std::vector<StabilizerSite> stabilizer_initial(const EntanglementSpec& e, std::int64_t L) {
  std::vector<StabilizerSite> v(static_cast<std::size_t>(L), StabilizerSite::position());
  for (const auto& b : e.initial)
    for (std::int64_t s : b.sites)
      if (s < L) v[static_cast<std::size_t>(s)] = b.stabilizer;
  return v;
}

std::int64_t boundary_cuts(const std::vector<std::int64_t>& sites, std::int64_t L, Boundary b) {
  std::vector<char> in(static_cast<std::size_t>(L), 0);
  for (std::int64_t s : sites) in[static_cast<std::size_t>(s)] = 1;
  const std::int64_t bonds = b == Boundary::Periodic ? L : L - 1;
  std::int64_t c = 0;
  for (std::int64_t k = 0; k < bonds; ++k)
    c += in[static_cast<std::size_t>(k)] != in[static_cast<std::size_t>((k + 1) % L)];
  return c;
}

CurveSummary summarize_curve(const double* S, std::size_t n) {
  CurveSummary out;
  if (n == 0) return out;
  const std::size_t T = n - 1;
  out.saturation_value = *std::max_element(S, S + n);
  const double level = kSaturationFraction * out.saturation_value;
  for (std::size_t t = 0; t < n; ++t)
    if (S[t] >= level) {
      out.saturation_time = static_cast<double>(t);
      break;
    }
  if (T >= 1) out.slope = late_slope(S, n);  // the window of the region rate (kernels/region_rate.hpp)
  return out;
}

std::int64_t bound_violations(const double* S, std::size_t n, double cap, double rate, double tol) {
  std::int64_t v = 0;
  for (std::size_t t = 0; t < n; ++t)
    v += S[t] > cap + tol || S[t] - S[0] > rate * static_cast<double>(t) + tol;
  return v;
}

// ---------------------------------------------------------------- per point

void compute_entanglement(const Config& c, const Point& p, PointRecord& r) {
  const EntanglementSpec& E = c.entanglement;
  if (!E.enabled) return;
  const auto t0 = std::chrono::steady_clock::now();
  const std::size_t nr = E.regions.size(), nt = static_cast<std::size_t>(E.periods) + 1;
  const std::size_t nn = E.stabilizer_dims.size();
  r.ent_cuts.assign(nr, -1);
  r.ent_lyapunov_rate.assign(nr, kNaN);
  r.ent_region_rate.assign(nr, kNaN);
  if (E.gaussian) {
    r.gauss_entropy.assign(nr * nt, kNaN);
    r.gauss_radius.assign(nr * nt, kNaN);
    r.gauss_failures.assign(nr, -1);
    for (auto* v : {&r.gauss_slope, &r.gauss_slope_over_lyapunov, &r.gauss_slope_over_region_rate,
                    &r.gauss_saturation_value, &r.gauss_saturation_time})
      v->assign(nr, kNaN);
  }
  if (nn > 0) {
    r.stab_entropy.assign(nn * nr * nt, kNaN);
    for (auto* v : {&r.stab_slope, &r.stab_slope_over_lyapunov, &r.stab_slope_over_lightcone,
                    &r.stab_saturation_value, &r.stab_saturation_time, &r.stab_cap, &r.stab_lightcone_rate})
      v->assign(nn * nr, kNaN);
    r.stab_violations.assign(nn * nr, -1);
  }
  auto finish = [&] {
    r.ent_wall_time = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  };
  auto note = [&](const std::string& what) {
    if (r.status != static_cast<std::int32_t>(PointStatus::Ok)) return;  // keep the first failure
    r.status = static_cast<std::int32_t>(PointStatus::EntanglementFailed);
    r.message = "entanglement: " + what;
  };
  // Cuts and Lambda_|A| (the asymptotic rate of a generic region) need only
  // the lattice and the exponents: they are filled also where no curve can
  // be computed (e.g. tangent exponents of a redrawn circuit).
  const std::int64_t L = p.L;
  std::vector<char> fits(nr, 0);
  for (std::size_t k = 0; k < nr; ++k) {
    const auto& sites = E.regions[k].sites;
    if (sites.back() >= L) continue;  // does not fit this lattice: NaN / -1
    fits[k] = 1;
    r.ent_cuts[k] = boundary_cuts(sites, L, p.boundary);
    r.ent_lyapunov_rate[k] = lyapunov_rate(r.exponents, L, static_cast<std::int64_t>(sites.size()));
  }
  Circuit circ;
  try {
    const GateSource gs = gate_source(c, p);
    if (!gs.time_periodic) {  // the kernels take one time-periodic circuit: NaN curves (docs)
      finish();
      return;
    }
    circ = materialize(gs);
    circ.validate();
  } catch (const std::exception& ex) {
    note(ex.what());
    finish();
    return;
  }

  // The rate each region reaches: the late slope of the exact log-volume of
  // its rows of S^t, over the window of the curves' slopes (only that window
  // is needed: ln vol is formed for t >= t0).
  {
    RegionRateOptions ro;
    ro.from_t = E.periods >= 1 ? static_cast<std::int64_t>(late_window_start(nt)) : 0;
    for (std::size_t k = 0; k < nr; ++k) {
      if (!fits[k]) continue;
      try {
        r.ent_region_rate[k] = region_rate(circ, E.regions[k].sites, E.periods, ro).rate;
      } catch (const std::exception& ex) {
        note("region rate of region " + std::to_string(k) + ": " + ex.what());
      }
    }
  }

  if (E.gaussian) {
    const std::vector<GaussianSite> init = gaussian_initial(E, L);
    for (std::size_t k = 0; k < nr; ++k) {
      if (!fits[k]) continue;
      try {
        const EntropyCurve cv = gaussian_entropy_curve(circ, init, E.regions[k].sites, E.periods, entropy_options(E));
        std::copy(cv.entropy.begin(), cv.entropy.end(), r.gauss_entropy.begin() + static_cast<std::ptrdiff_t>(k * nt));
        std::copy(cv.radius.begin(), cv.radius.end(), r.gauss_radius.begin() + static_cast<std::ptrdiff_t>(k * nt));
        r.gauss_failures[k] = cv.failures;
        const CurveSummary s = summarize_curve(cv.entropy.data(), nt);
        r.gauss_slope[k] = s.slope;
        r.gauss_slope_over_lyapunov[k] = rate_ratio(s.slope, r.ent_lyapunov_rate[k]);
        r.gauss_slope_over_region_rate[k] = rate_ratio(s.slope, r.ent_region_rate[k]);
        r.gauss_saturation_value[k] = s.saturation_value;
        r.gauss_saturation_time[k] = s.saturation_time;
        if (cv.failures > 0) {
          const double worst = *std::max_element(cv.radius.begin(), cv.radius.end());
          std::ostringstream os;
          os << "gaussian region " << k << ": " << cv.failures << " of " << nt
             << " times missed the certified radius target " << std::setprecision(3) << E.radius
             << " within entanglement.max_precision_bits = " << E.max_precision_bits << " (largest radius " << worst
             << ")";
          note(os.str());
        }
      } catch (const std::exception& ex) {
        note("gaussian region " + std::to_string(k) + ": " + ex.what());
      }
    }
  }

  if (nn > 0) {
    const std::vector<StabilizerSite> init = stabilizer_initial(E, L);
    for (std::size_t j = 0; j < nn; ++j) {
      const std::int64_t N = E.stabilizer_dims[j];
      const double lnN = std::log(static_cast<double>(N));
      for (std::size_t k = 0; k < nr; ++k) {
        if (!fits[k]) continue;
        const std::size_t q = j * nr + k;
        const std::int64_t A = static_cast<std::int64_t>(E.regions[k].sites.size());
        const double cap = static_cast<double>(std::min(A, L - A)) * lnN;
        const double rate = 2.0 * static_cast<double>(r.ent_cuts[k]) * lnN;
        r.stab_cap[q] = cap;
        r.stab_lightcone_rate[q] = rate;
        try {
          const std::vector<double> S = stabilizer_entropy_curve(circ, N, init, E.regions[k].sites, E.periods);
          std::copy(S.begin(), S.end(), r.stab_entropy.begin() + static_cast<std::ptrdiff_t>(q * nt));
          const CurveSummary s = summarize_curve(S.data(), nt);
          r.stab_slope[q] = s.slope;
          r.stab_slope_over_lyapunov[q] = rate_ratio(s.slope, r.ent_lyapunov_rate[k]);
          r.stab_slope_over_lightcone[q] = rate_ratio(s.slope, rate);
          r.stab_saturation_value[q] = s.saturation_value;
          r.stab_saturation_time[q] = s.saturation_time;
          r.stab_violations[q] = bound_violations(S.data(), nt, cap, rate, kViolationTolerance);
          if (r.stab_violations[q] > 0)
            note("stabilizer N = " + std::to_string(N) + " region " + std::to_string(k) + ": " +
                 std::to_string(r.stab_violations[q]) + " times above the Hilbert cap or the light cone (a bug)");
        } catch (const std::exception& ex) {
          note("stabilizer N = " + std::to_string(N) + " region " + std::to_string(k) + ": " + ex.what());
        }
      }
    }
    if (E.profile) {
      const std::size_t nk = static_cast<std::size_t>(E.periods / E.profile_stride) + 1;
      const std::size_t w = static_cast<std::size_t>(L) + 1;
      r.stab_profile.assign(nn * nk * w, kNaN);
      for (std::size_t j = 0; j < nn; ++j) {
        try {
          const auto prof = stabilizer_profile(circ, E.stabilizer_dims[j], init, E.periods, E.profile_stride);
          for (std::size_t k = 0; k < nk && k < prof.size(); ++k)
            std::copy_n(prof[k].begin(), std::min(w, prof[k].size()),
                        r.stab_profile.begin() + static_cast<std::ptrdiff_t>((j * nk + k) * w));
        } catch (const std::exception& ex) {
          note("stabilizer profile N = " + std::to_string(E.stabilizer_dims[j]) + ": " + ex.what());
        }
      }
    }
  }
  finish();
}

EntropyOptions entropy_options(const EntanglementSpec& E) {
  EntropyOptions o;
  o.target_radius = E.radius;
  o.max_prec_bits = E.max_precision_bits;
  return o;
}

EntanglementEstimate estimate_entanglement(const Config& c, const Point& p) {
  EntanglementEstimate est;
  const EntanglementSpec& E = c.entanglement;
  if (!E.enabled) return est;
  const GateSource gs = gate_source(c, p);
  if (!gs.time_periodic) return est;  // NaN curves, nothing computed
  Circuit circ = materialize(gs);
  circ.validate();
  const std::int64_t L = circ.L, T = E.periods;
  using clk = std::chrono::steady_clock;
  auto seconds = [](auto&& f) {
    const auto t0 = clk::now();
    f();
    return std::chrono::duration<double>(clk::now() - t0).count();
  };
  double work = 0;  // the kernels run one after another: the largest working set counts
  // cost(T) ~ a T + b T^2 (the exact integers grow linearly in bits), fitted
  // through the last two of probes at T = 16, 32, 64, ... that stop once a
  // probe takes kProbeSeconds (short probes are mostly jitter, which the
  // extrapolation multiplies by (T / t2)^2) or would pass T / 2. `probe(t)`
  // computes the curve to t and returns its seconds; `bytes(t1, t2)` the
  // working set extrapolated from the last probe.
  constexpr double kProbeSeconds = 0.5;
  auto quadratic = [&](auto&& probe, auto&& bytes) {
    if (T <= 32) {
      const double s = probe(T);  // the whole curve: measured, not extrapolated
      if (T > 0) work = std::max(work, bytes(T - 1, T));
      return s;
    }
    std::int64_t t1 = 16, t2 = 32;
    double c1 = probe(t1), c2 = probe(t2);
    while (c2 < kProbeSeconds && 2 * t2 <= T / 2) {
      t1 = t2;
      c1 = c2;
      t2 *= 2;
      c2 = probe(t2);
    }
    const double x1 = static_cast<double>(t1), x2 = static_cast<double>(t2), t = static_cast<double>(T);
    double b = (c2 / x2 - c1 / x1) / (x2 - x1);
    double a = c1 / x1 - b * x1;
    if (b < 0) {  // jitter: no visible growth, linear through the longer probe
      b = 0;
      a = c2 / x2;
    }
    work = std::max(work, bytes(t1, t2));
    return std::max(a, 0.0) * t + b * t * t;
  };
  if (E.gaussian) {
    const std::vector<GaussianSite> init = gaussian_initial(E, L);
    for (const EntanglementRegion& reg : E.regions) {
      if (reg.sites.back() >= L) continue;
      EntropyCurve cv;
      est.gaussian_s += quadratic(
          [&](std::int64_t t) {
            return seconds([&] { cv = gaussian_entropy_curve(circ, init, reg.sites, t, entropy_options(E)); });
          },
          [&](std::int64_t t1, std::int64_t t2) {
            return gaussian_work_bytes(cv, t1, t2, T, reg.sites.size(), L, entropy_options(E));
          });
    }
    est.bytes += 2.0 * 8.0 * static_cast<double>(E.regions.size()) * static_cast<double>(T + 1);
  }
  // The region rate (always with the table): probed on whole curves, an
  // overestimate (the run forms ln vol only on the last quarter).
  for (const EntanglementRegion& reg : E.regions) {
    if (reg.sites.back() >= L) continue;
    RegionRate rr;
    est.region_s += quadratic(
        [&](std::int64_t t) { return seconds([&] { rr = region_rate(circ, reg.sites, t); }); },
        [&](std::int64_t t1, std::int64_t t2) {
          return rr.bits.empty() ? 0.0 : region_rate_work_bytes(rr, t1, t2, T, reg.sites.size(), L);
        });
  }
  if (!E.stabilizer_dims.empty()) {
    const std::vector<StabilizerSite> init = stabilizer_initial(E, L);
    constexpr std::int64_t kS = 24;
    const std::int64_t Tp = std::min(T, kS);
    const double scale = Tp > 0 ? static_cast<double>(T) / static_cast<double>(Tp) : 1.0;
    for (const std::int64_t N : E.stabilizer_dims) {
      for (const EntanglementRegion& reg : E.regions) {
        if (reg.sites.back() >= L) continue;
        est.stabilizer_s +=
            scale * seconds([&] { (void)stabilizer_entropy_curve(circ, N, init, reg.sites, Tp); });
      }
      if (E.profile)
        est.stabilizer_s +=
            scale * seconds([&] { (void)stabilizer_profile(circ, N, init, Tp, std::min(E.profile_stride, std::max<std::int64_t>(Tp, 1))); });
      work = std::max(work, stabilizer_work_bytes(N, L, E.profile));
    }
    est.bytes += 8.0 * static_cast<double>(E.stabilizer_dims.size() * E.regions.size()) * static_cast<double>(T + 1);
    if (E.profile)
      est.bytes += 8.0 * static_cast<double>(E.stabilizer_dims.size()) *
                   static_cast<double>(E.periods / E.profile_stride + 1) * static_cast<double>(L + 1);
  }
  est.bytes += work;
  return est;
}

// ---------------------------------------------------------------- output

namespace {

double at(const std::vector<double>& v, std::size_t i) { return i < v.size() ? v[i] : kNaN; }
std::int64_t iat(const std::vector<std::int64_t>& v, std::size_t i) { return i < v.size() ? v[i] : -1; }

}  // namespace

void print_entanglement(std::ostream& os, const Config& c, const PointRecord& r, bool json) {
  const EntanglementSpec& E = c.entanglement;
  if (!E.enabled) return;
  const EntanglementAxes ax = entanglement_axes(c);
  const std::size_t nr = E.regions.size();
  if (json) {
    std::vector<std::int64_t> t(ax.times());
    std::iota(t.begin(), t.end(), std::int64_t{0});
    std::string sites = "[";
    for (std::size_t k = 0; k < nr; ++k) sites += (k ? ", " : "") + json_array(E.regions[k].sites);
    sites += "]";
    auto m = [&](const char* path, const std::string& value) { os << ",\n  \"" << path << "\": " << value; };
    m("/entanglement/t", json_array(t));
    m("/entanglement/region_size", json_array(ax.region_size));
    m("/entanglement/region_sites", sites);
    m("/entanglement/wall_time", json_num(r.ent_wall_time));
    m("/entanglement/cuts", json_array(r.ent_cuts));
    m("/entanglement/lyapunov_rate", json_array(r.ent_lyapunov_rate));
    m("/entanglement/region_rate", json_array(r.ent_region_rate));
    if (E.gaussian) {
      m("/entanglement/gaussian/entropy", json_array(r.gauss_entropy));
      m("/entanglement/gaussian/radius", json_array(r.gauss_radius));
      m("/entanglement/gaussian/failures", json_array(r.gauss_failures));
      m("/entanglement/gaussian/slope", json_array(r.gauss_slope));
      m("/entanglement/gaussian/slope_over_lyapunov", json_array(r.gauss_slope_over_lyapunov));
      m("/entanglement/gaussian/slope_over_region_rate", json_array(r.gauss_slope_over_region_rate));
      m("/entanglement/gaussian/saturation_value", json_array(r.gauss_saturation_value));
      m("/entanglement/gaussian/saturation_time", json_array(r.gauss_saturation_time));
    }
    if (!E.stabilizer_dims.empty()) {
      m("/entanglement/stabilizer/local_dim", json_array(E.stabilizer_dims));
      m("/entanglement/stabilizer/entropy", json_array(r.stab_entropy));
      m("/entanglement/stabilizer/slope", json_array(r.stab_slope));
      m("/entanglement/stabilizer/slope_over_lyapunov", json_array(r.stab_slope_over_lyapunov));
      m("/entanglement/stabilizer/slope_over_lightcone", json_array(r.stab_slope_over_lightcone));
      m("/entanglement/stabilizer/saturation_value", json_array(r.stab_saturation_value));
      m("/entanglement/stabilizer/saturation_time", json_array(r.stab_saturation_time));
      m("/entanglement/stabilizer/cap", json_array(r.stab_cap));
      m("/entanglement/stabilizer/lightcone_rate", json_array(r.stab_lightcone_rate));
      m("/entanglement/stabilizer/violations", json_array(r.stab_violations));
      if (E.profile) {
        std::vector<std::int64_t> tk(ax.profile_times());
        for (std::size_t k = 0; k < tk.size(); ++k) tk[k] = static_cast<std::int64_t>(k) * E.profile_stride;
        m("/entanglement/stabilizer/profile_t", json_array(tk));
        m("/entanglement/stabilizer/profile", json_array(r.stab_profile));
      }
    }
    return;
  }
  os << "  exact entanglement, t = 0.." << E.periods << " (" << num(r.ent_wall_time, 3) << " s; slope over the last"
     << " quarter, sat. = first t at 99% of the max;\n  Lambda_|A| = asymptotic rate of a generic region, region = rate"
     << " this region reaches, neither a bound):\n";
  if (E.gaussian) {
    os << "    gaussian " << std::setw(8) << "|A|" << std::setw(6) << "cuts" << std::setw(12) << "Lambda_|A|"
       << std::setw(12) << "region" << std::setw(12) << "slope" << std::setw(10) << "/Lambda" << std::setw(10)
       << "/region" << std::setw(12) << "S(T)" << std::setw(8) << "sat.t" << std::setw(12) << "max radius" << "\n";
    for (std::size_t k = 0; k < nr; ++k) {
      const std::size_t nt = ax.times();
      double rad = kNaN;
      for (std::size_t t = 0; t < nt; ++t) {
        const double x = at(r.gauss_radius, k * nt + t);
        if (!std::isnan(x)) rad = std::isnan(rad) ? x : std::max(rad, x);
      }
      os << "    " << std::setw(13) << E.regions[k].sites.size() << std::setw(6) << iat(r.ent_cuts, k)
         << std::setw(12) << num(at(r.ent_lyapunov_rate, k)) << std::setw(12) << num(at(r.ent_region_rate, k))
         << std::setw(12) << num(at(r.gauss_slope, k)) << std::setw(10) << num(at(r.gauss_slope_over_lyapunov, k), 4)
         << std::setw(10) << num(at(r.gauss_slope_over_region_rate, k), 4) << std::setw(12)
         << num(at(r.gauss_entropy, k * nt + nt - 1)) << std::setw(8) << num(at(r.gauss_saturation_time, k))
         << std::setw(12) << num(rad, 2) << "\n";
    }
  } else {
    os << "    regions  " << std::setw(8) << "|A|" << std::setw(6) << "cuts" << std::setw(12) << "Lambda_|A|"
       << std::setw(12) << "region" << "\n";
    for (std::size_t k = 0; k < nr; ++k)
      os << "    " << std::setw(13) << E.regions[k].sites.size() << std::setw(6) << iat(r.ent_cuts, k)
         << std::setw(12) << num(at(r.ent_lyapunov_rate, k)) << std::setw(12) << num(at(r.ent_region_rate, k))
         << "\n";
  }
  for (std::size_t j = 0; j < E.stabilizer_dims.size(); ++j) {
    os << "    N = " << std::setw(3) << E.stabilizer_dims[j] << std::setw(7) << "|A|" << std::setw(6) << "cuts"
       << std::setw(12) << "slope" << std::setw(10) << "/Lambda" << std::setw(10) << "/l.cone" << std::setw(12)
       << "sat.value" << std::setw(8) << "sat.t" << std::setw(10) << "cap" << std::setw(6) << "viol." << "\n";
    for (std::size_t k = 0; k < nr; ++k) {
      const std::size_t q = j * nr + k;
      os << "    " << std::setw(13) << E.regions[k].sites.size() << std::setw(6) << iat(r.ent_cuts, k)
         << std::setw(12) << num(at(r.stab_slope, q)) << std::setw(10) << num(at(r.stab_slope_over_lyapunov, q), 4)
         << std::setw(10) << num(at(r.stab_slope_over_lightcone, q), 4) << std::setw(12)
         << num(at(r.stab_saturation_value, q)) << std::setw(8) << num(at(r.stab_saturation_time, q))
         << std::setw(10) << num(at(r.stab_cap, q), 5) << std::setw(6) << iat(r.stab_violations, q) << "\n";
    }
  }
}

}  // namespace toral
