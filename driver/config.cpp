#include "config.hpp"

#include <toml++/toml.h>

#include <algorithm>
#include <fstream>
#include <set>
#include <sstream>

#include "config_ctx.hpp"
#include "families.hpp"

namespace toral {

namespace {


template <int n>
IntSq<n> read_matrix(const Ctx& cx, const toml::node& node, const std::string& key) {
  IntSq<n> m;
  const std::string shape = std::to_string(n) + "x" + std::to_string(n);
  if (!node.is_array() || node.as_array()->size() != static_cast<std::size_t>(n))
    cx.fail(node, key, "must be a " + shape + " integer matrix (a list of " + std::to_string(n) + " rows)");
  const auto& rows = *node.as_array();
  for (int i = 0; i < n; ++i) {
    const auto& r = rows[static_cast<std::size_t>(i)];
    if (!r.is_array() || r.as_array()->size() != static_cast<std::size_t>(n))
      cx.fail(r, key, "row " + std::to_string(i) + " must have " + std::to_string(n) + " integers");
    for (int j = 0; j < n; ++j) m(i, j) = cx.integer((*r.as_array())[static_cast<std::size_t>(j)], key);
  }
  return m;
}

GateSpec read_gate(const Ctx& cx, const toml::table& t, const std::string& where, bool bond,
                   std::int64_t line) {
  GateSpec g;
  g.present = true;
  g.where = where;
  std::set<std::string> allowed = {"matrix", "family"};
  if (bond) allowed.insert("kind");
  const toml::node* fam = t.get("family");
  const Family* family = nullptr;
  if (fam) {
    family = find_family(cx.string(*fam, where + ".family"));
    if (!family) {
      std::string list;
      for (const auto& f : families()) list += (list.empty() ? "" : ", ") + f.name;
      cx.fail(*fam, where + ".family", "unknown family \"" + fam->as_string()->get() + "\" (known: " + list + ")");
    }
    for (const auto& p : family->params) allowed.insert(p);
  }
  cx.only_keys(t, where, allowed);
  if (const toml::node* k = t.get("kind"))
    g.symplectic = cx.choice(*k, where + ".kind", {"position", "symplectic"}) == "symplectic";
  const toml::node* mat = t.get("matrix");
  if (mat && fam) cx.fail(*mat, where, "give either 'matrix' or 'family', not both");
  if (!mat && !fam) cx.fail(line, where, "needs a 'matrix' or a 'family'");
  if (mat) {
    g.explicit_matrix = true;
    if (bond && g.symplectic) {
      g.m4 = read_matrix<4>(cx, *mat, where + ".matrix");
      try {
        validate_symplectic_gate(g.m4, where + ".matrix");
      } catch (const ModelError& e) {
        cx.fail(*mat, "", e.what());
      }
    } else {
      g.m2 = read_matrix<2>(cx, *mat, where + ".matrix");
      try {
        if (bond)
          validate_position_gate(g.m2, where + ".matrix");
        else
          validate_site_gate(g.m2, where + ".matrix");
      } catch (const ModelError& e) {
        cx.fail(*mat, "", e.what());
      }
    }
    return g;
  }
  if (g.symplectic)
    cx.fail(*fam, where + ".family", "families give 2x2 gates: use kind = \"position\" or an explicit 4x4 matrix");
  g.family = family->name;
  for (const auto& pname : family->params) {
    const std::string key = where + "." + pname;
    const toml::node* v = t.get(pname);
    if (!v) cx.fail(line, where, "family \"" + family->name + "\" needs parameter '" + pname + "'");
    ParamSpec p;
    p.name = pname;
    p.line = static_cast<std::int64_t>(v->source().begin.line);
    const toml::table* vt = v->as_table();
    if (vt && vt->get("draw")) {
      cx.only_keys(*vt, key, {"draw"});
      const toml::node& d = *vt->get("draw");
      if (!d.is_array() || d.as_array()->size() != 2)
        cx.fail(d, key + ".draw", "must be [lo, hi], an inclusive integer range");
      p.drawn = true;
      p.lo = cx.integer((*d.as_array())[0], key + ".draw");
      p.hi = cx.integer((*d.as_array())[1], key + ".draw");
      if (p.lo > p.hi) cx.fail(d, key + ".draw", "lo > hi: empty range");
    } else {
      p.values = cx.int_values(*v, key);
    }
    g.params.push_back(std::move(p));
  }
  // Every extreme parameter combination must evaluate without overflow.
  std::vector<std::vector<std::int64_t>> ext;
  for (const auto& p : g.params) {
    if (p.drawn)
      ext.push_back({p.lo, p.hi});
    else
      ext.push_back({*std::min_element(p.values.begin(), p.values.end()),
                     *std::max_element(p.values.begin(), p.values.end())});
  }
  for (int mask = 0; mask < (1 << ext.size()); ++mask) {
    std::vector<std::int64_t> vals;
    for (std::size_t i = 0; i < ext.size(); ++i) vals.push_back(ext[i][(mask >> i) & 1]);
    try {
      const Mat2 m = family_matrix(g.family, vals);
      validate_position_gate(m, where);
      (void)embed_position_gate(m);
    } catch (const std::exception& e) {
      cx.fail(line, where, std::string("parameters out of range: ") + e.what());
    }
  }
  return g;
}

SweepSpec read_sweep(const Ctx& cx, const toml::table& t, std::size_t index) {
  SweepSpec s;
  s.where = "sweep[" + std::to_string(index) + "]";
  const std::int64_t line = static_cast<std::int64_t>(t.source().begin.line);
  cx.only_keys(t, s.where, {"name", "sites", "boundary", "seeds", "disorder", "bond", "site"});
  s.name = t.get("name") ? cx.string(*t.get("name"), s.where + ".name") : "sweep" + std::to_string(index);
  if (!t.get("sites")) cx.fail(line, s.where, "missing 'sites' (the lattice sizes L)");
  const toml::node& sites = *t.get("sites");
  s.sites = cx.int_values(sites, s.where + ".sites");
  s.sites_line = static_cast<std::int64_t>(sites.source().begin.line);
  if (const toml::node* b = t.get("boundary")) {
    std::vector<std::string> names;
    if (b->is_array()) {
      for (const auto& e : *b->as_array()) names.push_back(cx.choice(e, s.where + ".boundary", {"periodic", "open"}));
      if (names.empty()) cx.fail(*b, s.where + ".boundary", "empty scan: no values");
    } else {
      names.push_back(cx.choice(*b, s.where + ".boundary", {"periodic", "open"}));
    }
    for (const auto& n : names) s.boundaries.push_back(n == "periodic" ? Boundary::Periodic : Boundary::Open);
  } else {
    s.boundaries.push_back(Boundary::Periodic);
  }
  for (std::int64_t L : s.sites) {
    if (L < 2) cx.fail(sites, s.where + ".sites", "L = " + std::to_string(L) + " is below 2");
    for (Boundary b : s.boundaries)
      if (b == Boundary::Periodic && L % 2 != 0)
        cx.fail(sites, s.where + ".sites",
                "L = " + std::to_string(L) + " is odd; a periodic brick-wall needs even L");
  }
  if (!t.get("bond")) cx.fail(line, s.where, "missing [sweep.bond] (the two-site gate)");
  s.bond = read_gate(cx, cx.table(*t.get("bond"), s.where + ".bond"), s.where + ".bond", true,
                     static_cast<std::int64_t>(t.get("bond")->source().begin.line));
  if (const toml::node* st = t.get("site"))
    s.site = read_gate(cx, cx.table(*st, s.where + ".site"), s.where + ".site", false,
                       static_cast<std::int64_t>(st->source().begin.line));
  const bool drawn = s.bond.drawn() || s.site.drawn();
  if (const toml::node* sd = t.get("seeds")) {
    if (!drawn) cx.fail(*sd, s.where + ".seeds", "seeds given but no gate parameter is drawn ({draw = [lo, hi]})");
    s.seeds = cx.int_values(*sd, s.where + ".seeds");
    for (std::int64_t v : s.seeds)
      if (v < 0) cx.fail(*sd, s.where + ".seeds", "seeds must be >= 0");
  } else if (drawn) {
    cx.fail(line, s.where, "a gate parameter is drawn but 'seeds' is missing");
  }
  if (const toml::node* d = t.get("disorder")) {
    s.redrawn = cx.choice(*d, s.where + ".disorder", {"frozen", "redrawn"}) == "redrawn";
    if (s.redrawn && !drawn)
      cx.fail(*d, s.where + ".disorder", "\"redrawn\" needs a drawn gate parameter ({draw = [lo, hi]})");
  }
  return s;
}

}  // namespace

bool GateSpec::drawn() const {
  return std::any_of(params.begin(), params.end(), [](const ParamSpec& p) { return p.drawn; });
}

Config parse_config(const std::string& text, const std::string& source) {
  Config c;
  c.text = text;
  c.source = source;
  Ctx cx(source);
  toml::table root;
  try {
    root = toml::parse(text, source);
  } catch (const toml::parse_error& e) {
    cx.fail(static_cast<std::int64_t>(e.source().begin.line), "", std::string("TOML syntax: ") +
                                                                      std::string(e.description()));
  }
  {
    std::set<std::string> tables{"title", "sweep", "spectrum", "bounds"};
    for (const Diagnostic* d : diagnostics()) tables.insert(d->table());  // driver/diagnostics.cpp
    cx.only_keys(root, "", tables);
  }
  if (const toml::node* t = root.get("title")) c.title = cx.string(*t, "title");

  const toml::node* sw = root.get("sweep");
  if (!sw) cx.fail(1, "sweep", "missing: add at least one [[sweep]] table");
  if (!sw->is_array_of_tables()) cx.fail(*sw, "sweep", "must be an array of tables: write [[sweep]]");
  const auto& arr = *sw->as_array();
  if (arr.empty()) cx.fail(*sw, "sweep", "empty: add at least one [[sweep]] table");
  std::set<std::string> names;
  for (std::size_t i = 0; i < arr.size(); ++i) {
    c.sweeps.push_back(read_sweep(cx, *arr[i].as_table(), i));
    if (!names.insert(c.sweeps.back().name).second)
      cx.fail(arr[i], "sweep[" + std::to_string(i) + "].name", "duplicate sweep name \"" + c.sweeps.back().name + "\"");
  }

  if (const toml::node* sp = root.get("spectrum")) {
    const auto& t = cx.table(*sp, "spectrum");
    cx.only_keys(t, "spectrum", {"method", "dense_max", "certify_max", "max_error", "keep_all", "top", "bins", "bulk_limit",
                                   "krylov", "tangent"});
    auto& S = c.spectrum;
    if (const toml::node* m = t.get("method")) {
      const std::string name = cx.choice(*m, "spectrum.method", {"auto", "bloch", "dense", "krylov", "tangent"});
      S.method = name == "bloch"     ? SpectrumMethod::Bloch
                 : name == "dense"   ? SpectrumMethod::Dense
                 : name == "krylov"  ? SpectrumMethod::Krylov
                 : name == "tangent" ? SpectrumMethod::Tangent
                                     : SpectrumMethod::Auto;
      S.method_line = static_cast<std::int64_t>(m->source().begin.line);
    }
    auto positive = [&](const char* key, std::int64_t& out) {
      if (const toml::node* n = t.get(key)) {
        out = cx.integer(*n, std::string("spectrum.") + key);
        if (out < 1) cx.fail(*n, std::string("spectrum.") + key, "must be at least 1");
      }
    };
    positive("dense_max", S.dense_max);
    positive("keep_all", S.summary.keep_all);
    positive("top", S.summary.top);
    std::int64_t bins = S.summary.bins;
    positive("bins", bins);
    if (bins > 100000) cx.fail(*t.get("bins"), "spectrum.bins", "at most 100000 bins");
    S.summary.bins = static_cast<int>(bins);
    if (const toml::node* b = t.get("bulk_limit")) S.bulk_limit = cx.boolean(*b, "spectrum.bulk_limit");
    if (const toml::node* n = t.get("certify_max")) {
      S.certify_max = cx.integer(*n, "spectrum.certify_max");
      if (S.certify_max < 0 || S.certify_max > 4096) cx.fail(*n, "spectrum.certify_max", "must be in 0..4096");
    }
    auto count_key = [&](const toml::table& sub, const std::string& where, const char* key, std::int64_t& out,
                         std::int64_t lo, std::int64_t hi) {
      if (const toml::node* n = sub.get(key)) {
        out = cx.integer(*n, where + "." + key);
        if (out < lo || out > hi)
          cx.fail(*n, where + "." + key, "must be in " + std::to_string(lo) + ".." + std::to_string(hi));
      }
    };
    auto real_key = [&](const toml::table& sub, const std::string& where, const char* key, double& out, double lo,
                        double hi) {
      if (const toml::node* n = sub.get(key)) {
        if (!n->is_number()) cx.fail(*n, where + "." + key, "must be a number");
        out = n->is_integer() ? static_cast<double>(n->as_integer()->get()) : n->as_floating_point()->get();
        if (!(out > lo && out < hi)) cx.fail(*n, where + "." + key, "must be in (" + std::to_string(lo) + ", " +
                                                                      std::to_string(hi) + ")");
      }
    };
    real_key(t, "spectrum", "max_error", S.max_error, 0.0, 1.0);
    if (const toml::node* k = t.get("krylov")) {
      const auto& kt = cx.table(*k, "spectrum.krylov");
      cx.only_keys(kt, "spectrum.krylov",
                   {"count", "tolerance", "max_restarts", "policy", "cluster_tolerance", "ranks_per_point"});
      auto& K = S.krylov;
      count_key(kt, "spectrum.krylov", "count", K.count, 1, 10000);
      real_key(kt, "spectrum.krylov", "tolerance", K.tolerance, 0.0, 1e-2);
      count_key(kt, "spectrum.krylov", "max_restarts", K.max_restarts, 1, 1000000);
      real_key(kt, "spectrum.krylov", "cluster_tolerance", K.cluster_tolerance, 0.0, 1.0);
      if (const toml::node* p = kt.get("policy"))
        K.policy = cx.choice(*p, "spectrum.krylov.policy", {"auto", "largest", "shift_invert"});
      if (const toml::node* r = kt.get("ranks_per_point")) {
        if (r->is_string()) {
          cx.choice(*r, "spectrum.krylov.ranks_per_point", {"auto"});
          K.ranks_per_point = 0;
        } else {
          count_key(kt, "spectrum.krylov", "ranks_per_point", K.ranks_per_point, 1, 1 << 20);
        }
      }
    }
    if (const toml::node* k = t.get("tangent")) {
      const auto& tt = cx.table(*k, "spectrum.tangent");
      cx.only_keys(tt, "spectrum.tangent", {"count", "periods", "transient", "windows"});
      auto& T = S.tangent;
      count_key(tt, "spectrum.tangent", "count", T.count, 1, 10000);
      count_key(tt, "spectrum.tangent", "periods", T.periods, 2, 1000000000);
      count_key(tt, "spectrum.tangent", "transient", T.transient, 0, 1000000000);
      count_key(tt, "spectrum.tangent", "windows", T.windows, 2, 100000);
      if (T.windows > T.periods)
        cx.fail(tt.get("windows") ? *tt.get("windows") : *k, "spectrum.tangent.windows", "more windows than periods");
    }
  }
  // A forced method must apply to every point.
  for (const auto& s : c.sweeps) {
    const bool ti = !s.bond.drawn() && !s.site.drawn();
    if (c.spectrum.method == SpectrumMethod::Krylov && s.redrawn)
      cx.fail(c.spectrum.method_line, "spectrum.method",
              "\"krylov\" needs gates that repeat every period, but " + s.where + " redraws them (use \"tangent\")");
    // PETSc from Debian has 32-bit indices: the distributed matrix dimension
    // (L for position-class circuits, 2L otherwise) must stay below 2^31.
    const bool pos = !s.bond.symplectic && !s.site.present;
    for (std::int64_t L : s.sites)
      if ((pos ? L : 2 * L) >= (std::int64_t(1) << 31))
        cx.fail(s.sites_line, s.where + ".sites",
                "L = " + std::to_string(L) + " gives a matrix dimension beyond 2^31 - 1, the limit of a 32-bit-index PETSc");
    if (c.spectrum.method == SpectrumMethod::Bloch) {
      if (!ti)
        cx.fail(c.spectrum.method_line, "spectrum.method",
                "\"bloch\" needs translation-invariant gates, but " + s.where + " draws gate parameters");
      for (Boundary b : s.boundaries)
        if (b == Boundary::Open)
          cx.fail(c.spectrum.method_line, "spectrum.method",
                  "\"bloch\" needs a periodic boundary, but " + s.where + " has boundary \"open\"");
    }
  }

  if (const toml::node* bd = root.get("bounds")) {
    const auto& t = cx.table(*bd, "bounds");
    cx.only_keys(t, "bounds", {"regions", "local_dims", "placement"});
    auto& B = c.bounds;
    if (const toml::node* r = t.get("regions")) {
      B.regions = cx.int_values(*r, "bounds.regions");
      for (auto v : B.regions)
        if (v < 1) cx.fail(*r, "bounds.regions", "region size " + std::to_string(v) + " is below 1");
    }
    if (const toml::node* n = t.get("local_dims")) {
      B.local_dims = cx.int_values(*n, "bounds.local_dims");
      for (auto v : B.local_dims)
        if (v < 2) cx.fail(*n, "bounds.local_dims", "local dimension N = " + std::to_string(v) + " is below 2");
    }
    if (const toml::node* p = t.get("placement"))
      B.placement = cx.choice(*p, "bounds.placement", {"bulk", "edge"}) == "edge" ? Placement::Edge : Placement::Bulk;
  }
  for (const Diagnostic* d : diagnostics()) c.diagnostics.push_back(d->parse(text, source, c));
  return c;
}

std::int64_t largest_lattice(const Config& c) {
  std::int64_t m = 0;
  for (const auto& s : c.sweeps)
    for (std::int64_t L : s.sites) m = std::max(m, L);
  return m;
}

Config load_config(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) throw ConfigError(path + ": cannot read the config file");
  std::ostringstream ss;
  ss << in.rdbuf();
  return parse_config(ss.str(), path);
}

}  // namespace toral
