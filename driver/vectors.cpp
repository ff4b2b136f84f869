// Top Lyapunov vectors of the QR (Benettin) method as a diagnostic
// (driver/diagnostic.hpp): finite-time exponents over a window W shorter than
// the time a perturbation needs to reach a boundary, and the localisation of
// the final orthonormal tangent vectors (kernels/localisation.hpp). Table
// [vectors] (docs/config.md), group /vectors (docs/layout.md).
//
// Windows are independent restarts: window w = 0 .. n-1 starts from fresh
// initial vectors (Philox keyed by the point's seed, its identity and w; the
// entries by site, solvers/tangent.hpp) at period t0 = w (tau + W), discards
// tau periods and measures W. On an open chain the vectors of one long run
// leave through the boundaries (a convective instability, physics notes),
// so a long run would measure the boundary, not the bulk; restarts keep
// every window within the light-cone time. For gates redrawn every period
// the windows see different gates.
#include <toml++/toml.h>

#include <algorithm>
#include <cmath>
#include <iomanip>
#include <limits>
#include <ostream>
#include <tuple>

#include "config.hpp"
#include "config_ctx.hpp"
#include "diagnostic.hpp"
#include "diagnostic_kit.hpp"
#include "errors.hpp"
#include "families.hpp"
#include "localisation.hpp"
#include "sweep.hpp"
#include "tangent.hpp"
#include "text_format.hpp"

namespace toral {

namespace {

// The brick-wall's light cone: two sites per period each way.
constexpr std::int64_t kLightCone = 2;
constexpr std::int64_t kRingWindowCap = 200;
constexpr double kEps = std::numeric_limits<double>::epsilon();
constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

struct VectorsSpec : DiagnosticSpec {
  std::int64_t count = 4;       // k
  std::int64_t window = 0;      // W; 0: the rule (window_rule)
  std::int64_t transient = -1;  // tau; -1: the rule
  std::int64_t windows = 8;     // n independent windows
  std::int64_t ranks = 0;       // 0: automatic from the dimension
};

const std::string kG = "/vectors", kV = "/vectors/vector", kSite = "/vectors/site";

const char* const kRule =
    "defaults (per point): open chain: transient 0 and W the largest even W with 2 * 2 * (transient + W) <= L "
    "(a perturbation from the middle, moving at most 2 sites per period each way, does not reach a boundary "
    "before the window ends), at least 2; ring: W = the largest even number <= min(L/4, 200), at least 2, and "
    "transient = W";

std::int64_t even_at_least_2(std::int64_t x) { return std::max<std::int64_t>(2, x - x % 2); }

struct Plan {
  std::int64_t window = 2, transient = 0;
};

Plan plan_of(const VectorsSpec& e, const Point& p) {
  Plan pl;
  const bool open = p.boundary == Boundary::Open;
  if (open) {
    pl.transient = e.transient >= 0 ? e.transient : 0;
    pl.window = e.window > 0 ? e.window : even_at_least_2(p.L / (2 * kLightCone) - pl.transient);
  } else {
    const std::int64_t w = even_at_least_2(std::min(p.L / 4, kRingWindowCap));
    pl.window = e.window > 0 ? e.window : w;
    pl.transient = e.transient >= 0 ? e.transient : pl.window;
  }
  return pl;
}

std::uint64_t splitmix64(std::uint64_t x) {
  x += 0x9e3779b97f4a7c15ULL;
  x = (x ^ (x >> 30)) * 0xbf58476d1ce4e5b9ULL;
  x = (x ^ (x >> 27)) * 0x94d049bb133111ebULL;
  return x ^ (x >> 31);
}

// The initial-vector key of window w: (seed, point identity, w); the tangent
// solver adds the coordinate (site) and the column as its counter.
std::uint64_t window_seed(const Config& c, const Point& p, std::int64_t w) {
  const std::uint64_t s = p.seed >= 0 ? static_cast<std::uint64_t>(p.seed) : 0;
  return splitmix64(splitmix64(fnv1a64(point_identity(c, p)) ^ splitmix64(s)) + static_cast<std::uint64_t>(w));
}

std::int64_t block_code(const std::string& src) { return src == "M" ? 1 : src == "M^-T" ? 2 : 0; }

FieldDecl field(const std::string& name, Elem t, std::vector<std::string> dims, std::vector<bool> ragged,
                std::string units, std::string meaning, std::string stats = {}) {
  return field_decl(kG + "/" + name, t, std::move(dims), std::move(ragged), std::move(units), std::move(meaning),
                    std::move(stats));
}

// Mean and standard error of the mean of xs (n >= 2).
std::pair<double, double> mean_se(const std::vector<double>& xs) {
  const double n = static_cast<double>(xs.size());
  double m = 0;
  for (double x : xs) m += x;
  m /= n;
  double ss = 0;
  for (double x : xs) ss += (x - m) * (x - m);
  return {m, xs.size() > 1 ? std::sqrt(ss / (n * (n - 1))) : kNaN};
}

const VectorsSpec& spec_of(const Config& c);

class VectorsDiagnostic final : public Diagnostic {
 public:
  std::string table() const override { return "vectors"; }

  std::shared_ptr<const DiagnosticSpec> parse(const std::string& text, const std::string& source,
                                              const Config&) const override {
    auto e = std::make_shared<VectorsSpec>();
    const Ctx cx(source);
    const DiagnosticTable d = read_diagnostic_table(text, source, "vectors");
    if (!d.table) return e;
    const std::string P = "vectors";
    const toml::table& t = *d.table;
    cx.only_keys(t, P, {"count", "window", "transient", "windows", "ranks"});
    e->enabled = true;
    if (const toml::node* n = t.get("count")) {
      e->count = cx.integer(*n, P + ".count");
      if (e->count < 1 || e->count > 1000) cx.fail(*n, P + ".count", std::to_string(e->count) + " is outside 1..1000");
    }
    if (const toml::node* n = t.get("window")) {
      e->window = cx.integer(*n, P + ".window");
      if (e->window < 2 || e->window > 10'000'000 || e->window % 2 != 0)
        cx.fail(*n, P + ".window", std::to_string(e->window) + " must be even and in 2..10^7 (periods)");
    }
    if (const toml::node* n = t.get("transient")) {
      e->transient = cx.integer(*n, P + ".transient");
      if (e->transient < 0 || e->transient > 10'000'000)
        cx.fail(*n, P + ".transient", std::to_string(e->transient) + " is outside 0..10^7 (periods)");
    }
    if (const toml::node* n = t.get("windows")) {
      e->windows = cx.integer(*n, P + ".windows");
      if (e->windows < 2 || e->windows > 100'000)
        cx.fail(*n, P + ".windows", std::to_string(e->windows) + " is outside 2..100000");
    }
    if (const toml::node* n = t.get("ranks")) {
      e->ranks = cx.integer(*n, P + ".ranks");
      if (e->ranks < 0 || e->ranks > 1'000'000) cx.fail(*n, P + ".ranks", "must be >= 0 (0: automatic)");
    }
    return e;
  }

  Schema declare(const Config& c) const override {
    const VectorsSpec& e = spec_of(c);
    Schema s;
    s.groups.push_back(
        {kG,
         "top Lyapunov vectors of the QR (Benettin) method (solvers/tangent.hpp): finite-time exponents over a "
         "window W of periods and the localisation of the final orthonormal (Gram-Schmidt) tangent vectors; "
         "`windows` independent restarts, each from fresh seeded vectors, `transient` periods discarded, then W "
         "measured; values are means over the windows (docs/entanglement.md, 'Why a fixed region grows slower')",
         {AttrDecl::of("window_rule", std::string(kRule)), AttrDecl::of("windows", e.windows),
          AttrDecl::of("weight_floor", kWeightFloor)}});
    s.coords.push_back(index_axis(kV, e.count, "1", "index j of a top exponent (0 = the largest) and its vector"));
    s.coords.push_back(index_axis(kSite, largest_lattice(c), "1", "site index i, 0 .. the largest L of the run"));
    s.fields.push_back(field("window", Elem::I64, {}, {}, "periods",
                             "W, the window length of the finite-time exponents (attribute window_rule)"));
    s.fields.push_back(field("transient", Elem::I64, {}, {}, "periods",
                             "periods discarded before each window (attribute window_rule)"));
    s.fields.push_back(field("exponent", Elem::F64, {kV}, {false}, "1/period",
                             "finite-time exponent lambda_j(W) = (1/W) sum ln|R_jj| over the window, mean over the "
                             "windows; NaN beyond 2L",
                             "vectors_exponent"));
    s.fields.push_back(field("exponent_standard_error", Elem::F64, {kV}, {false}, "1/period",
                             "standard error of exponent from the scatter of the windows"));
    s.fields.push_back(field("exponent_drift", Elem::F64, {kV}, {false}, "1/period",
                             "|mean over the windows of (rate over the second half of W - rate over the first half)|: "
                             "the finite-time bias (an O(1/W) or O(ln W / W) correction) that the scatter misses"));
    s.fields.push_back(field("exponent_error", Elem::F64, {kV}, {false}, "1/period",
                             "accuracy of exponent as the rate over W of a bulk-like growth: sqrt(standard_error^2 "
                             "+ drift^2 + (256 eps max(1, |exponent|))^2)"));
    s.fields.push_back(field("block", Elem::I64, {kV}, {false}, "1",
                             "where the vector lives: 0 = S (general gates), 1 = q (M-cocycle), 2 = p (M^-T-cocycle) "
                             "for position-class circuits; -1 beyond 2L"));
    s.fields.push_back(field("ipr", Elem::F64, {kV}, {false}, "1",
                             "inverse participation ratio sum_i w_i^2, w_i = (q_i^2 + p_i^2) / |v|^2, of the final "
                             "vector, mean over the windows"));
    s.fields.push_back(field("ipr_error", Elem::F64, {kV}, {false}, "1",
                             "standard error of ipr over the windows (and 16 eps ipr for rounding)"));
    s.fields.push_back(field("participation", Elem::F64, {kV}, {false}, "sites",
                             "participation number 1/ipr of the final vector (the number of sites it occupies: L "
                             "for equal weights, 1 on one site), mean over the windows",
                             "vectors_participation"));
    s.fields.push_back(field("participation_error", Elem::F64, {kV}, {false}, "sites",
                             "standard error of participation over the windows (and 16 eps for rounding)"));
    s.fields.push_back(field("localisation_length", Elem::F64, {kV}, {false}, "sites",
                             "xi = -2 / s, s the least-squares slope of ln w_i against the distance from the peak "
                             "site over the sites with w_i >= weight_floor (|v_i| ~ exp(-d / xi)), mean over the "
                             "windows; +inf when the weights do not decay (an extended vector)"));
    s.fields.push_back(field("localisation_length_error", Elem::F64, {kV}, {false}, "sites",
                             "sqrt(SE^2 + mean of the fits' 2 se(s) / s^2 squared): window scatter and the fit's "
                             "residual scatter; NaN where localisation_length is +inf"));
    s.fields.push_back(field("peak_site", Elem::I64, {kV}, {false}, "1", "site of the largest weight, last window"));
    s.fields.push_back(field("weight", Elem::F64, {kV, kSite}, {false, true}, "1",
                             "w_i of the final vector of the last window, [j][site]; NaN beyond the point's L"));
    return s;
  }

  DiagnosticOutput compute(const Config& c, const Point& p, const PointRecord&, MPI_Comm group) const override {
    DiagnosticOutput out;
    int rank = 0;
    MPI_Comm_rank(group, &rank);
    const VectorsSpec& e = spec_of(c);
    const Plan pl = plan_of(e, p);
    const std::size_t k = static_cast<std::size_t>(e.count);
    const std::size_t n = static_cast<std::size_t>(e.windows);
    const std::int64_t L = p.L;
    const bool ring = p.boundary == Boundary::Periodic;
    // [j][window] on rank 0
    std::vector<std::vector<double>> lam(k), half(k), ipr(k), pn(k), xi(k), xierr(k);
    std::vector<std::int64_t> block(k, -1), peak(k, -1);
    std::vector<double> weight(k * static_cast<std::size_t>(L), kNaN);
    std::size_t K = k;
    try {
      const GateSource gs = gate_source(c, p);
      for (std::size_t w = 0; w < n; ++w) {
        TangentOptions o;
        o.k = static_cast<int>(e.count);
        o.periods = pl.window;
        o.windows = 2;
        o.transient = pl.transient;
        o.t0 = static_cast<std::int64_t>(w) * (pl.transient + pl.window);
        o.seed = window_seed(c, p, static_cast<std::int64_t>(w));
        o.options_prefix = "toral_vectors_";
        o.keep_vectors = true;
        const TangentResult tr = tangent_top(group, gs, o);
        if (!tr.ok) throw SolverError("tangent: " + tr.message);
        if (rank != 0) continue;
        K = std::min(K, tr.exponents.size());
        for (std::size_t j = 0; j < K; ++j) {
          lam[j].push_back(tr.exponents[j]);
          half[j].push_back(tr.window_means[1][j] - tr.window_means[0][j]);
          const Localisation loc = localisation(tr.vectors[j], L, ring);
          ipr[j].push_back(loc.ipr);
          pn[j].push_back(loc.participation);
          xi[j].push_back(loc.xi);
          xierr[j].push_back(loc.xi_error);
          block[j] = block_code(tr.source[j]);
          if (w + 1 == n) {
            peak[j] = loc.peak;
            std::copy(loc.weight.begin(), loc.weight.end(),
                      weight.begin() + static_cast<std::ptrdiff_t>(j * static_cast<std::size_t>(L)));
          }
        }
      }
    } catch (const std::exception& ex) {
      out.failure = ex.what();
      if (rank == 0) {
        out.fields.resize(15);
        out.fields[0] = scalar_value(pl.window);
        out.fields[1] = scalar_value(pl.transient);
      }
      return out;
    }
    if (rank != 0) return out;
    const auto vec = [&](std::vector<double> v) {
      FieldValue f;
      f.shape = {static_cast<std::int64_t>(k)};
      f.f = std::move(v);
      return f;
    };
    const auto ivec = [&](std::vector<std::int64_t> v) {
      FieldValue f;
      f.shape = {static_cast<std::int64_t>(k)};
      f.i = std::move(v);
      return f;
    };
    std::vector<double> ex(k, kNaN), se(k, kNaN), dr(k, kNaN), err(k, kNaN), ip(k, kNaN), ipe(k, kNaN),
        pm(k, kNaN), pme(k, kNaN), xm(k, kNaN), xme(k, kNaN);
    for (std::size_t j = 0; j < K; ++j) {
      std::tie(ex[j], se[j]) = mean_se(lam[j]);
      dr[j] = std::fabs(mean_se(half[j]).first);
      const double rounding = 256.0 * kEps * std::max(1.0, std::fabs(ex[j]));
      err[j] = std::sqrt(se[j] * se[j] + dr[j] * dr[j] + rounding * rounding);
      std::tie(ip[j], ipe[j]) = mean_se(ipr[j]);
      ipe[j] = std::hypot(ipe[j], 16.0 * kEps * ip[j]);
      std::tie(pm[j], pme[j]) = mean_se(pn[j]);
      pme[j] = std::hypot(pme[j], 16.0 * kEps * pm[j]);
      const bool any_nan = std::any_of(xi[j].begin(), xi[j].end(), [](double x) { return std::isnan(x); });
      const bool any_inf = std::any_of(xi[j].begin(), xi[j].end(), [](double x) { return std::isinf(x); });
      if (any_nan) {
        xm[j] = xme[j] = kNaN;
      } else if (any_inf) {
        xm[j] = std::numeric_limits<double>::infinity();
        xme[j] = kNaN;
      } else {
        double fit2 = 0;
        for (double x : xierr[j]) fit2 += x * x;
        fit2 /= static_cast<double>(xierr[j].size());
        std::tie(xm[j], xme[j]) = mean_se(xi[j]);
        xme[j] = std::sqrt(xme[j] * xme[j] + fit2);
      }
    }
    FieldValue wf;
    wf.shape = {static_cast<std::int64_t>(k), L};
    wf.f = std::move(weight);
    out.fields = {scalar_value(pl.window), scalar_value(pl.transient), vec(ex), vec(se), vec(dr), vec(err),
                  ivec(block), vec(ip), vec(ipe), vec(pm), vec(pme), vec(xm), vec(xme), ivec(peak), std::move(wf)};
    return out;
  }

  DiagnosticEstimate estimate(const Config& c, const Point& p) const override {
    // Model, not a probe: per period about 20 k^2 dim flops for the
    // orthonormalisation and the products, at ~1 Gflop/s; memory: two frames
    // of k vectors per cocycle and the gathered vectors.
    const VectorsSpec& e = spec_of(c);
    const Plan pl = plan_of(e, p);
    const double dim = 2.0 * static_cast<double>(p.L), k = static_cast<double>(e.count);
    DiagnosticEstimate d;
    d.seconds = 20.0 * k * k * dim * static_cast<double>((pl.transient + pl.window) * e.windows) * 1e-9;
    d.bytes = 8.0 * dim * k * 3.0 + 8.0 * static_cast<double>(p.L) * k;
    return d;
  }

  int ranks_wanted(const Config& c, const Point& p) const override {
    const VectorsSpec& e = spec_of(c);
    if (e.ranks > 0) return static_cast<int>(e.ranks);
    return static_cast<int>(std::max<std::int64_t>(1, (2 * p.L + 249999) / 250000));  // as spectrum.krylov
  }

  void print_text(std::ostream& os, const Config&, const std::vector<FieldValue>& v) const override {
    if (v.size() < 15 || v[2].empty()) {
      os << "  vectors: none\n";
      return;
    }
    os << "  top Lyapunov vectors (QR method): finite-time exponents over W = " << v[0].i[0]
       << " periods after " << v[1].i[0] << " discarded, mean over the windows; localisation of the final vectors:\n"
       << "    " << std::setw(3) << "j" << std::setw(6) << "block" << std::setw(12) << "lambda_j(W)" << std::setw(11)
       << "+-" << std::setw(12) << "1/IPR" << std::setw(11) << "xi" << std::setw(10) << "+-" << std::setw(6)
       << "peak" << "\n";
    static const char* names[] = {"S", "q", "p"};
    for (std::size_t j = 0; j < v[2].f.size(); ++j) {
      const std::int64_t b = v[6].i[j];
      os << "    " << std::setw(3) << j << std::setw(6) << (b >= 0 && b <= 2 ? names[b] : "-") << std::setw(12)
         << num(v[2].f[j]) << std::setw(11) << num(v[5].f[j], 2) << std::setw(12) << num(v[9].f[j], 5)
         << std::setw(11) << num(v[11].f[j], 4) << std::setw(10) << num(v[12].f[j], 2) << std::setw(6)
         << v[13].i[j] << "\n";
    }
  }
};

const VectorsDiagnostic& instance() {
  static const VectorsDiagnostic d;
  return d;
}

const VectorsSpec& spec_of(const Config& c) { return static_cast<const VectorsSpec&>(diagnostic_spec(c, instance())); }

}  // namespace

const Diagnostic& vectors_diagnostic() { return instance(); }

}  // namespace toral
