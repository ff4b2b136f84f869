#include "entangle.hpp"

#include "config_ctx.hpp"
#include "diagnostic_kit.hpp"
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

#include "bloch.hpp"
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

}  // namespace

// ---------------------------------------------------------------- config

namespace {

EntanglementSpec parse_entanglement(const std::string& text, const std::string& source, const Config& c) {
  EntanglementSpec e;
  const Loc cx(source);
  const DiagnosticTable tab = read_diagnostic_table(text, source, "entanglement");
  if (!tab.table) return e;
  const std::string P = "entanglement";
  const toml::table& t = *tab.table;
  const std::int64_t tline = tab.line;
  cx.only_keys(t, P, {"periods", "regions", "offset", "gaussian", "stabilizer_dims", "profile", "profile_stride",
                      "initial", "radius", "max_precision_bits", "rate_window"});
  e.enabled = true;
  const std::int64_t Lmax = largest_lattice(c);

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

  if (const toml::node* rw = t.get("rate_window")) {
    e.rate_window = cx.integer(*rw, P + ".rate_window");
    if (!e.gaussian) cx.fail(*rw, P + ".rate_window", "given but gaussian is false (the local rate is of the Gaussian curves)");
    if (e.rate_window < 1 || e.rate_window > 1'000'000)
      cx.fail(*rw, P + ".rate_window", std::to_string(e.rate_window) + " is outside 1..10^6 (periods)");
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

// One declared field of the diagnostic and the member of EntanglementValues
// that holds it: the single list behind declare, compute's output and the
// decoder (entanglement_values).
struct Slot {
  FieldDecl decl;
  double EntanglementValues::*scalar = nullptr;
  std::vector<double> EntanglementValues::*f = nullptr;
  std::vector<std::int64_t> EntanglementValues::*i = nullptr;
};

FieldDecl field(std::string path, Elem type, std::vector<std::string> dims, std::string units, std::string meaning,
                std::string stats = {}) {
  return field_decl(std::move(path), type, std::move(dims), {}, std::move(units), std::move(meaning), std::move(stats));
}

const char* const kG = "/entanglement";
const std::string kT = "/entanglement/t", kR = "/entanglement/region", kN = "/entanglement/stabilizer/local_dim";

std::vector<Slot> slots(const EntanglementSpec& E) {
  using V = EntanglementValues;
  std::vector<Slot> s;
  auto F = [&](FieldDecl d, std::vector<double> V::*m) { s.push_back({std::move(d), nullptr, m, nullptr}); };
  auto I = [&](FieldDecl d, std::vector<std::int64_t> V::*m) { s.push_back({std::move(d), nullptr, nullptr, m}); };
  const std::string g = kG;
  s.push_back({field(g + "/wall_time", Elem::F64, {}, "s",
                     "wall-clock time spent in the exact entanglement kernels (part of /points/wall_time)"),
               &V::ent_wall_time, nullptr, nullptr});
  I(field(g + "/cuts", Elem::I64, {kR}, "1",
          "boundary cuts c of the region at the point: bonds with one end inside A; -1 where the region does not fit"),
    &V::ent_cuts);
  F(field(g + "/lyapunov_rate", Elem::F64, {kR}, "nats/period",
          "Lambda_|A|, the asymptotic entropy growth rate of a generic region of |A| sites: sum of the 2 min(|A|, "
          "L-|A|) largest exponents of the point (as /bounds/lyapunov_rate); not a bound, and not the rate of every "
          "region (region_rate); NaN where fewer are known and for |A| = L",
          "entanglement_lyapunov_rate"),
    &V::ent_lyapunov_rate);
  F(field(g + "/region_rate", Elem::F64, {kR}, "nats/period",
          "the growth rate this region's Gaussian entropy reaches: late-time least-squares slope (window "
          "slope_window) of ln vol(P_A S^t), the exact log-volume of the 2 min(|A|, L-|A|)-site rows of S^t "
          "(kernels/region_rate.hpp); equals lyapunov_rate for a generic region, less for a region in a special "
          "position; a rate, not a bound; NaN for |A| = L and for circuits redrawn every period",
          "entanglement_region_rate"),
    &V::ent_region_rate);
  F(field(g + "/transient_rate", Elem::F64, {kR}, "nats/period",
          "open chains of translation-invariant gates repeated every period: Lambda_|A| of the periodic ring of the "
          "same gates and L (Bloch spectrum), the rate a bulk region grows at while its backward light cone stays "
          "inside the chain (t < transient_window: the region's rows of S^t are then the ring's integers), however "
          "small the open chain's eigenvalue exponents (docs/rays.md); a rate, not a bound; NaN for rings (use "
          "lyapunov_rate), disordered or redrawn circuits (see /vectors) and |A| = L",
          "entanglement_transient_rate"),
    &V::ent_transient_rate);
  I(field(g + "/transient_window", Elem::I64, {kR}, "periods",
          "open chains: floor(d / 2), d = the region's distance (sites) to the nearer end: the periods before its "
          "backward light cone (2 sites per period each way) reaches an end; -1 for rings"),
    &V::ent_transient_window);
  if (E.gaussian) {
    const std::string q = g + "/gaussian";
    F(field(q + "/entropy", Elem::F64, {kR, kT}, "nats", "midpoint of the certified von Neumann entropy S_A(t), [region][t]"),
      &V::gauss_entropy);
    F(field(q + "/radius", Elem::F64, {kR, kT}, "nats", "certified radius: |S_A(t) - entropy| <= radius, [region][t]"),
      &V::gauss_radius);
    I(field(q + "/failures", Elem::I64, {kR}, "1",
            "number of t whose radius missed the target (then the point's status is diagnostic_failed); -1 not "
            "computed"),
      &V::gauss_failures);
    F(field(q + "/slope", Elem::F64, {kR}, "nats/period",
            "late-time least-squares slope of S_A(t) (attribute slope_window of /entanglement)", "gaussian_slope"),
      &V::gauss_slope);
    F(field(q + "/slope_over_lyapunov", Elem::F64, {kR}, "1",
            "slope / Lambda_|A| (/entanglement/lyapunov_rate) by the rule for ratios over rates (x/0 = +-inf for x "
            "!= 0, 0/0 = NaN); tends to 1 for a generic region of a chaotic circuit, below 1 for a region in a "
            "special position",
            "gaussian_slope_over_lyapunov"),
      &V::gauss_slope_over_lyapunov);
    F(field(q + "/slope_over_region_rate", Elem::F64, {kR}, "1",
            "slope / region_rate (/entanglement/region_rate), same window, by the rule for ratios over rates; tends "
            "to 1 for every region (S_A(t) - ln vol(P_A S^t) stays bounded)",
            "gaussian_slope_over_region_rate"),
      &V::gauss_slope_over_region_rate);
    F(field(q + "/slope_over_transient", Elem::F64, {kR}, "1",
            "slope / transient_rate (/entanglement/transient_rate) by the rule for ratios over rates: finite on open "
            "chains whose eigenvalue exponents vanish; meaningful when the slope window ends before transient_window",
            "gaussian_slope_over_transient"),
      &V::gauss_slope_over_transient);
    F(field(q + "/saturation_value", Elem::F64, {kR}, "nats", "max over t of S_A(t)"), &V::gauss_saturation_value);
    F(field(q + "/saturation_time", Elem::F64, {kR}, "periods", "first t with S_A(t) >= 0.99 saturation_value"),
      &V::gauss_saturation_time);
    F(field(q + "/rate", Elem::F64, {kR, kT}, "nats/period",
            "time-resolved local rate dS_A/dt: the central difference (entropy(t+h) - entropy(t-h)) / (2h), h = "
            "attribute rate_window of /entanglement, [region][t]; NaN for t < h and t > T - h; compare with "
            "Lambda_|A| (lyapunov_rate) and region_rate"),
      &V::gauss_rate);
    F(field(q + "/rate_radius", Elem::F64, {kR, kT}, "nats/period",
            "certified radius of rate: (radius(t+h) + radius(t-h)) / (2h); the exact difference quotient of the "
            "exact curve lies within rate +- rate_radius"),
      &V::gauss_rate_radius);
  }
  if (!E.stabilizer_dims.empty()) {
    const std::string q = g + "/stabilizer";
    F(field(q + "/entropy", Elem::F64, {kN, kR, kT}, "nats",
            "entanglement entropy S_A(t), exact (a sum of integer multiples of ln p), [N][region][t]"),
      &V::stab_entropy);
    F(field(q + "/slope", Elem::F64, {kN, kR}, "nats/period",
            "late-time least-squares slope of S_A(t) (attribute slope_window of /entanglement)", "stabilizer_slope"),
      &V::stab_slope);
    F(field(q + "/slope_over_lyapunov", Elem::F64, {kN, kR}, "1",
            "slope / Lambda_|A| (/entanglement/lyapunov_rate), by the rule for ratios over rates",
            "stabilizer_slope_over_lyapunov"),
      &V::stab_slope_over_lyapunov);
    F(field(q + "/slope_over_lightcone", Elem::F64, {kN, kR}, "1",
            "slope / lightcone_rate (at most 1: the light cone is a bound)", "stabilizer_slope_over_lightcone"),
      &V::stab_slope_over_lightcone);
    F(field(q + "/slope_over_transient", Elem::F64, {kN, kR}, "1",
            "slope / transient_rate (/entanglement/transient_rate), by the rule for ratios over rates",
            "stabilizer_slope_over_transient"),
      &V::stab_slope_over_transient);
    F(field(q + "/saturation_value", Elem::F64, {kN, kR}, "nats", "max over t of S_A(t)", "stabilizer_saturation_value"),
      &V::stab_saturation_value);
    F(field(q + "/saturation_time", Elem::F64, {kN, kR}, "periods", "first t with S_A(t) >= 0.99 saturation_value",
            "stabilizer_saturation_time"),
      &V::stab_saturation_time);
    F(field(q + "/cap", Elem::F64, {kN, kR}, "nats",
            "Hilbert-space cap min(|A|, L-|A|) ln N: a bound on S_A (theorem)"),
      &V::stab_cap);
    F(field(q + "/lightcone_rate", Elem::F64, {kN, kR}, "nats/period",
            "light-cone rate 2 c ln N of the region's c cuts: a bound on the growth of S_A per period (theorem)"),
      &V::stab_lightcone_rate);
    I(field(q + "/violations", Elem::I64, {kN, kR}, "1",
            "number of t with S_A(t) > cap + 1e-9 or S_A(t) - S_A(0) > lightcone_rate t + 1e-9; 0 by theorem; -1 "
            "not computed"),
      &V::stab_violations);
    if (E.profile) {
      FieldDecl d = field(q + "/profile", Elem::F64, {kN, q + "/profile_t", q + "/cut"}, "nats",
                          "S([0, x)) of the site prefix [0, x) at t = profile_t[k], [N][k][x], x = 0..L; NaN padded "
                          "beyond the point's L");
      d.ragged = {false, false, true};
      d.attrs.push_back(AttrDecl::of("stride", E.profile_stride));
      F(std::move(d), &V::stab_profile);
    }
  }
  return s;
}

Schema declare_entanglement(const Config& c) {
  const EntanglementSpec& e = entanglement_spec(c);
  Schema s;
  GroupDecl g;
  g.path = kG;
  g.meaning =
      "exact entanglement dynamics S_A(t), t = 0..T, of fixed regions A from a product initial state "
      "(docs/entanglement.md); NaN (int64: -1) where a region does not fit the point's lattice or nothing was "
      "computed";
  g.attrs = {AttrDecl::of("slope_window",
                          std::string("least-squares slope of S_A(t), and of ln vol(P_A S^t) for region_rate, over t "
                                      "= t0..T, t0 = min(ceil(3T/4), T-1); NaN for T = 0")),
             AttrDecl::of("saturation_fraction", kSaturationFraction),
             AttrDecl::of("rate_window", e.rate_window),
             AttrDecl::of("violation_tolerance", kViolationTolerance)};
  s.groups.push_back(g);
  if (e.gaussian)
    s.groups.push_back({std::string(kG) + "/gaussian",
                        "certified entropies of Gaussian states on R^2L under x -> S x (kernels/gaussian_exact.hpp); "
                        "the exact value lies within entropy +- radius",
                        {}});
  if (!e.stabilizer_dims.empty())
    s.groups.push_back({std::string(kG) + "/stabilizer",
                        "exact entropies of stabilizer states of L qudits of dimension N under the circuit read as a "
                        "Clifford circuit mod N (kernels/stabilizer.hpp), [N][region][t]",
                        {}});
  s.coords.push_back(index_axis(kT, e.periods + 1, "periods", "time t of the last axis of every entropy curve: 0..T"));
  s.coords.push_back(index_axis(kR, static_cast<std::int64_t>(e.regions.size()), "1",
                                "the region axis: index of a region in entanglement.regions (0-based)"));
  std::size_t width = 0;
  {
    CoordDecl r;
    r.path = std::string(kG) + "/region_size";
    r.type = Elem::I64;
    r.dims = {kR};
    for (const auto& reg : e.regions) {
      r.i.push_back(static_cast<std::int64_t>(reg.sites.size()));
      width = std::max(width, reg.sites.size());
    }
    r.units = "sites";
    r.meaning = "|A|, the number of sites of each region (along the region axis; sizes may repeat)";
    s.coords.push_back(std::move(r));
  }
  const std::string slot = std::string(kG) + "/site_slot";
  s.coords.push_back(index_axis(slot, static_cast<std::int64_t>(width), "1",
                                "position of a site within its region: last axis of region_sites"));
  {
    CoordDecl r;
    r.path = std::string(kG) + "/region_sites";
    r.type = Elem::I64;
    r.dims = {kR, slot};
    r.i.assign(e.regions.size() * width, -1);
    for (std::size_t i = 0; i < e.regions.size(); ++i)
      std::copy(e.regions[i].sites.begin(), e.regions[i].sites.end(),
                r.i.begin() + static_cast<std::ptrdiff_t>(i * width));
    r.units = "1";
    r.meaning = "sites of each region (row), ascending; -1 padded to the largest region";
    s.coords.push_back(std::move(r));
  }
  if (!e.stabilizer_dims.empty()) {
    s.coords.push_back(int_axis(kN, e.stabilizer_dims, "1", "local dimension N: axis 1 of every per-point dataset"));
    if (e.profile) {
      const std::string q = std::string(kG) + "/stabilizer";
      s.coords.push_back(index_axis(q + "/profile_t", e.periods / e.profile_stride + 1, "periods",
                                    "time of axis 2 of profile: k * stride", e.profile_stride));
      s.coords.push_back(index_axis(q + "/cut", largest_lattice(c) + 1, "sites",
                                    "x of the prefix [0, x): last axis of profile, 0 .. the largest L of the run"));
    }
  }
  for (auto& sl : slots(e)) s.fields.push_back(std::move(sl.decl));
  return s;
}


}  // namespace

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

namespace {

// The values of point p; `failure` receives the first failure ("" when none).
EntanglementValues compute_values(const Config& c, const Point& p, const PointRecord& r, std::string& failure) {
  const EntanglementSpec& E = entanglement_spec(c);
  EntanglementValues v;
  const auto t0 = std::chrono::steady_clock::now();
  const std::size_t nr = E.regions.size(), nt = static_cast<std::size_t>(E.periods) + 1;
  const std::size_t nn = E.stabilizer_dims.size();
  v.ent_cuts.assign(nr, -1);
  v.ent_lyapunov_rate.assign(nr, kNaN);
  v.ent_region_rate.assign(nr, kNaN);
  v.ent_transient_rate.assign(nr, kNaN);
  v.ent_transient_window.assign(nr, -1);
  if (E.gaussian) {
    v.gauss_entropy.assign(nr * nt, kNaN);
    v.gauss_radius.assign(nr * nt, kNaN);
    v.gauss_failures.assign(nr, -1);
    v.gauss_rate.assign(nr * nt, kNaN);
    v.gauss_rate_radius.assign(nr * nt, kNaN);
    for (auto* v : {&v.gauss_slope, &v.gauss_slope_over_lyapunov, &v.gauss_slope_over_region_rate,
                    &v.gauss_slope_over_transient,
                    &v.gauss_saturation_value, &v.gauss_saturation_time})
      v->assign(nr, kNaN);
  }
  if (nn > 0) {
    v.stab_entropy.assign(nn * nr * nt, kNaN);
    for (auto* v : {&v.stab_slope, &v.stab_slope_over_lyapunov, &v.stab_slope_over_lightcone,
                    &v.stab_slope_over_transient,
                    &v.stab_saturation_value, &v.stab_saturation_time, &v.stab_cap, &v.stab_lightcone_rate})
      v->assign(nn * nr, kNaN);
    v.stab_violations.assign(nn * nr, -1);
  }
  auto finish = [&] {
    v.ent_wall_time = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  };
  auto note = [&](const std::string& what) {
    if (failure.empty()) failure = what;  // keep the first failure
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
    v.ent_cuts[k] = boundary_cuts(sites, L, p.boundary);
    v.ent_lyapunov_rate[k] = lyapunov_rate(r.exponents, L, static_cast<std::int64_t>(sites.size()));
  }
  Circuit circ;
  try {
    const GateSource gs = gate_source(c, p);
    if (!gs.time_periodic) {  // the kernels take one time-periodic circuit: NaN curves (docs)
      finish();
      return v;
    }
    circ = materialize(gs);
    circ.validate();
    if (gs.boundary == Boundary::Open) {
      for (std::size_t k = 0; k < nr; ++k)
        if (fits[k]) {
          const auto& sites = E.regions[k].sites;
          v.ent_transient_window[k] = std::min(sites.front(), L - 1 - sites.back()) / 2;
        }
      if (gs.translation_invariant) {  // the ring of the same gates: its Bloch spectrum
        const Spectrum sp = twin_ring_spectrum(gs);
        const auto ring_L = static_cast<std::int64_t>(sp.exponents.size() / 2);
        for (std::size_t k = 0; k < nr; ++k)
          if (fits[k])
            v.ent_transient_rate[k] =
                lyapunov_rate(sp.exponents, ring_L, static_cast<std::int64_t>(E.regions[k].sites.size()));
      }
    }
  } catch (const std::exception& ex) {
    note(ex.what());
    finish();
    return v;
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
        v.ent_region_rate[k] = region_rate(circ, E.regions[k].sites, E.periods, ro).rate;
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
        std::copy(cv.entropy.begin(), cv.entropy.end(), v.gauss_entropy.begin() + static_cast<std::ptrdiff_t>(k * nt));
        std::copy(cv.radius.begin(), cv.radius.end(), v.gauss_radius.begin() + static_cast<std::ptrdiff_t>(k * nt));
        v.gauss_failures[k] = cv.failures;
        {  // the local rate: central differences over [t - h, t + h]
          const std::size_t h = static_cast<std::size_t>(E.rate_window);
          const double w = 2.0 * static_cast<double>(h);
          for (std::size_t t = h; t + h < nt && t + h < cv.entropy.size(); ++t) {
            v.gauss_rate[k * nt + t] = (cv.entropy[t + h] - cv.entropy[t - h]) / w;
            v.gauss_rate_radius[k * nt + t] = (cv.radius[t + h] + cv.radius[t - h]) / w;
          }
        }
        const CurveSummary s = summarize_curve(cv.entropy.data(), nt);
        v.gauss_slope[k] = s.slope;
        v.gauss_slope_over_lyapunov[k] = rate_ratio(s.slope, v.ent_lyapunov_rate[k]);
        v.gauss_slope_over_region_rate[k] = rate_ratio(s.slope, v.ent_region_rate[k]);
        v.gauss_slope_over_transient[k] = rate_ratio(s.slope, v.ent_transient_rate[k]);
        v.gauss_saturation_value[k] = s.saturation_value;
        v.gauss_saturation_time[k] = s.saturation_time;
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
        const double rate = 2.0 * static_cast<double>(v.ent_cuts[k]) * lnN;
        v.stab_cap[q] = cap;
        v.stab_lightcone_rate[q] = rate;
        try {
          const std::vector<double> S = stabilizer_entropy_curve(circ, N, init, E.regions[k].sites, E.periods);
          std::copy(S.begin(), S.end(), v.stab_entropy.begin() + static_cast<std::ptrdiff_t>(q * nt));
          const CurveSummary s = summarize_curve(S.data(), nt);
          v.stab_slope[q] = s.slope;
          v.stab_slope_over_lyapunov[q] = rate_ratio(s.slope, v.ent_lyapunov_rate[k]);
          v.stab_slope_over_lightcone[q] = rate_ratio(s.slope, rate);
          v.stab_slope_over_transient[q] = rate_ratio(s.slope, v.ent_transient_rate[k]);
          v.stab_saturation_value[q] = s.saturation_value;
          v.stab_saturation_time[q] = s.saturation_time;
          v.stab_violations[q] = bound_violations(S.data(), nt, cap, rate, kViolationTolerance);
          if (v.stab_violations[q] > 0)
            note("stabilizer N = " + std::to_string(N) + " region " + std::to_string(k) + ": " +
                 std::to_string(v.stab_violations[q]) + " times above the Hilbert cap or the light cone (a bug)");
        } catch (const std::exception& ex) {
          note("stabilizer N = " + std::to_string(N) + " region " + std::to_string(k) + ": " + ex.what());
        }
      }
    }
    if (E.profile) {
      const std::size_t nk = static_cast<std::size_t>(E.periods / E.profile_stride) + 1;
      const std::size_t w = static_cast<std::size_t>(L) + 1;
      v.stab_profile.assign(nn * nk * w, kNaN);
      for (std::size_t j = 0; j < nn; ++j) {
        try {
          const auto prof = stabilizer_profile(circ, E.stabilizer_dims[j], init, E.periods, E.profile_stride);
          for (std::size_t k = 0; k < nk && k < prof.size(); ++k)
            std::copy_n(prof[k].begin(), std::min(w, prof[k].size()),
                        v.stab_profile.begin() + static_cast<std::ptrdiff_t>((j * nk + k) * w));
        } catch (const std::exception& ex) {
          note("stabilizer profile N = " + std::to_string(E.stabilizer_dims[j]) + ": " + ex.what());
        }
      }
    }
  }
  finish();
  return v;
}

}  // namespace

EntropyOptions entropy_options(const EntanglementSpec& E) {
  EntropyOptions o;
  o.target_radius = E.radius;
  o.max_prec_bits = E.max_precision_bits;
  return o;
}

EntanglementEstimate estimate_entanglement(const Config& c, const Point& p) {
  EntanglementEstimate est;
  const EntanglementSpec& E = entanglement_spec(c);
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

// The human-readable table of `toral point`.
void print_values(std::ostream& os, const EntanglementSpec& E, const EntanglementValues& v) {
  const std::size_t nr = E.regions.size(), ntimes = static_cast<std::size_t>(E.periods) + 1;
  os << "  exact entanglement, t = 0.." << E.periods << " (" << num(v.ent_wall_time, 3) << " s; slope over the last"
     << " quarter, sat. = first t at 99% of the max;\n  Lambda_|A| = asymptotic rate of a generic region, region = rate"
     << " this region reaches, neither a bound):\n";
  if (E.gaussian) {
    os << "    gaussian " << std::setw(8) << "|A|" << std::setw(6) << "cuts" << std::setw(12) << "Lambda_|A|"
       << std::setw(12) << "region" << std::setw(12) << "slope" << std::setw(10) << "/Lambda" << std::setw(10)
       << "/region" << std::setw(12) << "S(T)" << std::setw(8) << "sat.t" << std::setw(12) << "max radius" << "\n";
    for (std::size_t k = 0; k < nr; ++k) {
      const std::size_t nt = ntimes;
      double rad = kNaN;
      for (std::size_t t = 0; t < nt; ++t) {
        const double x = at(v.gauss_radius, k * nt + t);
        if (!std::isnan(x)) rad = std::isnan(rad) ? x : std::max(rad, x);
      }
      os << "    " << std::setw(13) << E.regions[k].sites.size() << std::setw(6) << iat(v.ent_cuts, k)
         << std::setw(12) << num(at(v.ent_lyapunov_rate, k)) << std::setw(12) << num(at(v.ent_region_rate, k))
         << std::setw(12) << num(at(v.gauss_slope, k)) << std::setw(10) << num(at(v.gauss_slope_over_lyapunov, k), 4)
         << std::setw(10) << num(at(v.gauss_slope_over_region_rate, k), 4) << std::setw(12)
         << num(at(v.gauss_entropy, k * nt + nt - 1)) << std::setw(8) << num(at(v.gauss_saturation_time, k))
         << std::setw(12) << num(rad, 2) << "\n";
    }
  } else {
    os << "    regions  " << std::setw(8) << "|A|" << std::setw(6) << "cuts" << std::setw(12) << "Lambda_|A|"
       << std::setw(12) << "region" << "\n";
    for (std::size_t k = 0; k < nr; ++k)
      os << "    " << std::setw(13) << E.regions[k].sites.size() << std::setw(6) << iat(v.ent_cuts, k)
         << std::setw(12) << num(at(v.ent_lyapunov_rate, k)) << std::setw(12) << num(at(v.ent_region_rate, k))
         << "\n";
  }
  bool transient = false;
  for (std::size_t k = 0; k < nr; ++k) transient = transient || std::isfinite(at(v.ent_transient_rate, k));
  if (transient) {
    os << "    open chain: its eigenvalue exponents miss what travels; a bulk region grows at the ring's rate while\n"
       << "    its backward light cone stays inside (t < window; docs/rays.md):\n"
       << "    transient" << std::setw(7) << "|A|" << std::setw(12) << "rate" << std::setw(8) << "window"
       << std::setw(12) << "slope/rate" << "\n";
    for (std::size_t k = 0; k < nr; ++k)
      os << "    " << std::setw(13) << E.regions[k].sites.size() << std::setw(12) << num(at(v.ent_transient_rate, k))
         << std::setw(8) << iat(v.ent_transient_window, k) << std::setw(12)
         << num(E.gaussian ? at(v.gauss_slope_over_transient, k) : kNaN, 4) << "\n";
  }
  for (std::size_t j = 0; j < E.stabilizer_dims.size(); ++j) {
    os << "    N = " << std::setw(3) << E.stabilizer_dims[j] << std::setw(7) << "|A|" << std::setw(6) << "cuts"
       << std::setw(12) << "slope" << std::setw(10) << "/Lambda" << std::setw(10) << "/l.cone" << std::setw(12)
       << "sat.value" << std::setw(8) << "sat.t" << std::setw(10) << "cap" << std::setw(6) << "viol." << "\n";
    for (std::size_t k = 0; k < nr; ++k) {
      const std::size_t q = j * nr + k;
      os << "    " << std::setw(13) << E.regions[k].sites.size() << std::setw(6) << iat(v.ent_cuts, k)
         << std::setw(12) << num(at(v.stab_slope, q)) << std::setw(10) << num(at(v.stab_slope_over_lyapunov, q), 4)
         << std::setw(10) << num(at(v.stab_slope_over_lightcone, q), 4) << std::setw(12)
         << num(at(v.stab_saturation_value, q)) << std::setw(8) << num(at(v.stab_saturation_time, q))
         << std::setw(10) << num(at(v.stab_cap, q), 5) << std::setw(6) << iat(v.stab_violations, q) << "\n";
    }
  }
}


// ---------------------------------------------------------------- the diagnostic

namespace {

// The values of `v` as compute's output, one per slot.
std::vector<FieldValue> emit(const EntanglementSpec& E, const EntanglementValues& v) {
  std::vector<FieldValue> out;
  for (const Slot& sl : slots(E)) {
    FieldValue fv;
    if (sl.scalar) {
      fv.f = {v.*sl.scalar};
    } else {
      const std::size_t n = sl.f ? (v.*sl.f).size() : (v.*sl.i).size();
      if (n > 0) {
        if (sl.f) fv.f = v.*sl.f;
        else fv.i = v.*sl.i;
        const std::size_t nr = E.regions.size(), nn = E.stabilizer_dims.size(), nt = static_cast<std::size_t>(E.periods) + 1;
        const auto& d = sl.decl.dims;
        for (const auto& x : d) {
          if (x == kR) fv.shape.push_back(static_cast<std::int64_t>(nr));
          else if (x == kT) fv.shape.push_back(static_cast<std::int64_t>(nt));
          else if (x == kN) fv.shape.push_back(static_cast<std::int64_t>(nn));
          else if (x.size() > 10 && x.compare(x.size() - 10, 10, "/profile_t") == 0)
            fv.shape.push_back(E.periods / E.profile_stride + 1);
          else  // the prefix cut x = 0..L of this point: what is left
            fv.shape.push_back(static_cast<std::int64_t>(n / (nn * static_cast<std::size_t>(E.periods / E.profile_stride + 1))));
        }
      }
    }
    out.push_back(std::move(fv));
  }
  return out;
}

EntanglementValues decode(const EntanglementSpec& E, const FieldValue* values, std::size_t count) {
  EntanglementValues v;
  const std::vector<Slot> sl = slots(E);
  for (std::size_t k = 0; k < sl.size() && k < count; ++k) {
    const FieldValue& fv = values[k];
    if (sl[k].scalar) v.*sl[k].scalar = fv.f.empty() ? kNaN : fv.f[0];
    else if (sl[k].f) v.*sl[k].f = fv.f;
    else v.*sl[k].i = fv.i;
  }
  return v;
}

class EntanglementDiagnostic final : public Diagnostic {
 public:
  std::string table() const override { return "entanglement"; }
  std::shared_ptr<const DiagnosticSpec> parse(const std::string& text, const std::string& source,
                                              const Config& c) const override {
    return std::make_shared<EntanglementSpec>(parse_entanglement(text, source, c));
  }
  Schema declare(const Config& c) const override { return declare_entanglement(c); }
  DiagnosticOutput compute(const Config& c, const Point& p, const PointRecord& r, MPI_Comm group) const override {
    // Serial kernels: only the group's leader, whose record is kept, computes.
    int rank = 0;
    MPI_Comm_rank(group, &rank);
    DiagnosticOutput out;
    if (rank != 0) return out;
    const EntanglementValues v = compute_values(c, p, r, out.failure);
    out.fields = emit(entanglement_spec(c), v);
    return out;
  }
  DiagnosticEstimate estimate(const Config& c, const Point& p) const override {
    const EntanglementEstimate e = estimate_entanglement(c, p);
    return {e.gaussian_s + e.stabilizer_s + e.region_s, e.bytes};
  }
  void print_text(std::ostream& os, const Config& c, const std::vector<FieldValue>& values) const override {
    const EntanglementSpec& E = entanglement_spec(c);
    print_values(os, E, decode(E, values.data(), values.size()));
  }
};

}  // namespace

const Diagnostic& entanglement_diagnostic() {
  static const EntanglementDiagnostic d;
  return d;
}

const EntanglementSpec& entanglement_spec(const Config& c) {
  return static_cast<const EntanglementSpec&>(diagnostic_spec(c, entanglement_diagnostic()));
}

EntanglementValues entanglement_values(const Config& c, const PointRecord& r) {
  const EntanglementSpec& E = entanglement_spec(c);
  if (!E.enabled || r.fields.empty()) return {};
  std::vector<std::size_t> off;
  const Schema s = run_schema(c, &off);
  const auto& reg = diagnostics();
  for (std::size_t k = 0; k < reg.size(); ++k)
    if (reg[k] == &entanglement_diagnostic()) return decode(E, r.fields.data() + off[k], off[k + 1] - off[k]);
  return {};
}

}  // namespace toral
