#include "sweep.hpp"

#include <algorithm>
#include <functional>
#include <set>
#include <sstream>

#include "families.hpp"

namespace toral {

namespace {

// The scanned (non-drawn) values of a gate's parameters, one list each.
std::vector<std::vector<std::int64_t>> scanned(const GateSpec& g) {
  std::vector<std::vector<std::int64_t>> out;
  for (const auto& p : g.params) out.push_back(p.drawn ? std::vector<std::int64_t>{0} : p.values);
  return out;
}

std::int64_t product_size(const SweepSpec& s) {
  std::int64_t n = static_cast<std::int64_t>(s.sites.size() * s.boundaries.size());
  for (const auto& v : scanned(s.bond)) n *= static_cast<std::int64_t>(v.size());
  if (s.site.present)
    for (const auto& v : scanned(s.site)) n *= static_cast<std::int64_t>(v.size());
  if (!s.seeds.empty()) n *= static_cast<std::int64_t>(s.seeds.size());
  return n;
}

}  // namespace

ParamTable param_table(const Config& c) {
  ParamTable t;
  t.names = {"sweep", "sites", "boundary", "seed"};
  t.meanings = {"index into the root attribute sweep_names", "lattice size L (sites)",
                "0 = periodic, 1 = open", "disorder seed (absent when nothing is drawn)"};
  std::set<std::string> swept;
  if (c.sweeps.size() > 1) swept.insert("sweep");
  std::set<std::int64_t> Ls;
  std::set<int> bs;
  for (const auto& s : c.sweeps) {
    Ls.insert(s.sites.begin(), s.sites.end());
    for (auto b : s.boundaries) bs.insert(static_cast<int>(b));
    if (s.seeds.size() > 1) swept.insert("seed");
    for (const auto* g : {&s.bond, &s.site}) {
      if (!g->present) continue;
      const std::string prefix = g == &s.bond ? "bond_" : "site_";
      for (const auto& p : g->params) {
        if (p.drawn) continue;
        const std::string name = prefix + p.name;
        if (std::find(t.names.begin(), t.names.end(), name) == t.names.end()) {
          t.names.push_back(name);
          t.meanings.push_back("parameter " + p.name + " of the " + (g == &s.bond ? "bond" : "site") +
                               " gate family of the point's sweep (absent where not a scanned family parameter)");
        }
        if (p.values.size() > 1) swept.insert(name);
      }
    }
  }
  if (Ls.size() > 1) swept.insert("sites");
  if (bs.size() > 1) swept.insert("boundary");
  for (const auto& n : t.names)
    if (swept.count(n)) t.swept.push_back(n);
  return t;
}

std::vector<std::int64_t> param_values(const Config& c, const ParamTable& t, const Point& p) {
  std::vector<std::int64_t> v(t.names.size(), kAbsent);
  v[0] = p.sweep;
  v[1] = p.L;
  v[2] = static_cast<std::int64_t>(p.boundary);
  v[3] = p.seed >= 0 ? p.seed : kAbsent;
  const SweepSpec& s = c.sweeps[static_cast<std::size_t>(p.sweep)];
  for (const auto* g : {&s.bond, &s.site}) {
    if (!g->present) continue;
    const std::string prefix = g == &s.bond ? "bond_" : "site_";
    const auto& vals = g == &s.bond ? p.bond : p.site;
    for (std::size_t i = 0; i < g->params.size(); ++i) {
      if (g->params[i].drawn) continue;
      const auto it = std::find(t.names.begin(), t.names.end(), prefix + g->params[i].name);
      v[static_cast<std::size_t>(it - t.names.begin())] = vals[i];
    }
  }
  return v;
}

std::int64_t point_count(const Config& c) {
  std::int64_t n = 0;
  for (const auto& s : c.sweeps) n += product_size(s);
  return n;
}

std::vector<Point> expand(const Config& c) {
  std::vector<Point> out;
  out.reserve(static_cast<std::size_t>(point_count(c)));
  for (std::size_t si = 0; si < c.sweeps.size(); ++si) {
    const SweepSpec& s = c.sweeps[si];
    const auto bv = scanned(s.bond);
    const auto sv = s.site.present ? scanned(s.site) : std::vector<std::vector<std::int64_t>>{};
    std::vector<std::vector<std::int64_t>> axes = bv;
    axes.insert(axes.end(), sv.begin(), sv.end());
    const std::vector<std::int64_t> seeds = s.seeds.empty() ? std::vector<std::int64_t>{-1} : s.seeds;
    for (Boundary b : s.boundaries)
      for (std::int64_t L : s.sites) {
        std::vector<std::size_t> idx(axes.size(), 0);
        // odometer over the scanned family parameters, last one fastest
        auto next = [&]() {
          for (std::size_t k = axes.size(); k-- > 0;) {
            if (++idx[k] < axes[k].size()) return true;
            idx[k] = 0;
          }
          return false;
        };
        do {
          for (std::int64_t seed : seeds) {
            Point p;
            p.index = static_cast<std::int64_t>(out.size());
            p.sweep = static_cast<int>(si);
            p.L = L;
            p.boundary = b;
            p.seed = seed;
            for (std::size_t k = 0; k < bv.size(); ++k) p.bond.push_back(axes[k][idx[k]]);
            for (std::size_t k = bv.size(); k < axes.size(); ++k) p.site.push_back(axes[k][idx[k]]);
            out.push_back(std::move(p));
          }
        } while (next());
      }
  }
  return out;
}

std::string point_identity(const Config& c, const Point& p) {
  const SweepSpec& s = c.sweeps[static_cast<std::size_t>(p.sweep)];
  std::ostringstream os;
  os << "sweep=" << s.name << ";L=" << p.L << ";boundary=" << boundary_name(p.boundary);
  for (std::size_t i = 0; i < p.bond.size(); ++i)
    if (!s.bond.params[i].drawn) os << ";bond_" << s.bond.params[i].name << '=' << p.bond[i];
  for (std::size_t i = 0; i < p.site.size(); ++i)
    if (!s.site.params[i].drawn) os << ";site_" << s.site.params[i].name << '=' << p.site[i];
  return os.str();
}

namespace {

// Stream tags separating bond draws from site draws; the period of a
// time-redrawn circuit is folded into the same counter word.
constexpr std::uint64_t kTagBond = 1, kTagSite = 2;
std::uint64_t stream_tag(std::uint64_t tag, std::int64_t t) { return tag | (static_cast<std::uint64_t>(t) << 8); }

Mat2 family_gate(const GateSpec& g, const std::vector<std::int64_t>& fixed, std::uint64_t seed,
                 std::uint64_t key, std::uint64_t slot, std::uint64_t tag) {
  std::vector<std::int64_t> v(g.params.size());
  for (std::size_t i = 0; i < g.params.size(); ++i) {
    const auto& p = g.params[i];
    v[i] = p.drawn ? draw_uniform(seed, key, slot, i, tag, p.lo, p.hi) : fixed[i];
  }
  return family_matrix(g.family, v);
}

}  // namespace

GateSource gate_source(const Config& c, const Point& p) {
  const SweepSpec& s = c.sweeps[static_cast<std::size_t>(p.sweep)];
  GateSource g;
  g.L = p.L;
  g.boundary = p.boundary;
  g.has_site_layer = s.site.present;
  g.position_class = !s.bond.symplectic && !s.site.present;
  g.time_periodic = !s.redrawn;
  const bool bond_drawn = s.bond.drawn(), site_drawn = s.site.drawn();
  g.translation_invariant = !bond_drawn && !site_drawn;
  const std::uint64_t seed = p.seed >= 0 ? static_cast<std::uint64_t>(p.seed) : 0;
  const std::uint64_t key = fnv1a64(point_identity(c, p));
  const bool redrawn = s.redrawn;
  if (!bond_drawn) {
    BondGate uniform;
    if (s.bond.explicit_matrix)
      uniform = s.bond.symplectic ? BondGate::symplectic(s.bond.m4) : BondGate::position(s.bond.m2);
    else
      uniform = BondGate::position(family_gate(s.bond, p.bond, seed, key, 0, kTagBond));
    g.bond = [uniform](std::int64_t, std::int64_t) { return uniform; };
  } else {
    const GateSpec spec = s.bond;
    const std::vector<std::int64_t> fixed = p.bond;
    g.bond = [spec, fixed, seed, key, redrawn](std::int64_t b, std::int64_t t) {
      return BondGate::position(family_gate(spec, fixed, seed, key, static_cast<std::uint64_t>(b),
                                            stream_tag(kTagBond, redrawn ? t : 0)));
    };
  }
  if (s.site.present) {
    if (!site_drawn) {
      const Mat2 m = s.site.explicit_matrix ? s.site.m2 : family_gate(s.site, p.site, seed, key, 0, kTagSite);
      g.site = [m](std::int64_t, std::int64_t) { return m; };
    } else {
      const GateSpec spec = s.site;
      const std::vector<std::int64_t> fixed = p.site;
      g.site = [spec, fixed, seed, key, redrawn](std::int64_t i, std::int64_t t) {
        return family_gate(spec, fixed, seed, key, static_cast<std::uint64_t>(i), stream_tag(kTagSite, redrawn ? t : 0));
      };
    }
  }
  return g;
}

Circuit build_circuit(const Config& c, const Point& p) { return materialize(gate_source(c, p)); }

}  // namespace toral
