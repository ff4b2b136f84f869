// The Bloch band structure as a diagnostic (driver/diagnostic.hpp): for
// translation-invariant circuits, the four exponents of the Bloch block at
// every allowed momentum of a periodic ring, and in the bulk on a fixed k
// grid, with each block's class (elliptic, parabolic, hyperbolic) and the
// k-ranges of each class (kernels/bloch.hpp: ring_bands, bulk_bands,
// band_arcs). Table [bands] (docs/config.md), group /bands (docs/layout.md).
#include <toml++/toml.h>

#include <algorithm>
#include <cmath>
#include <numbers>
#include <ostream>
#include <sstream>

#include "bloch.hpp"
#include "config.hpp"
#include "config_ctx.hpp"
#include "diagnostic.hpp"
#include "diagnostic_kit.hpp"
#include "sweep.hpp"
#include "text_format.hpp"

namespace toral {

namespace {

constexpr double kPi = std::numbers::pi;

struct BandsSpec : DiagnosticSpec {
  bool ring = true;            // the bands at a periodic ring's momenta
  bool bulk = true;            // the bulk bands on the grid, the arcs and kinks
  std::int64_t grid = 65;      // k_j = pi j / (grid - 1), j = 0 .. grid - 1
  std::int64_t max_arcs = 32;  // capacity of the arc and kink axes
};

const std::string kG = "/bands", kBand = "/bands/band", kMom = "/bands/momentum", kK = "/bands/k",
                  kArc = "/bands/arc", kKink = "/bands/kink";

CoordDecl index_axis(const std::string& path, std::int64_t n, const std::string& meaning) {
  return toral::index_axis(path, n, "1", meaning);
}

FieldDecl field(const std::string& name, Elem t, std::vector<std::string> dims, std::vector<bool> ragged,
                std::string units, std::string meaning, std::string stats = {}) {
  return field_decl(kG + "/" + name, t, std::move(dims), std::move(ragged), std::move(units), std::move(meaning),
                    std::move(stats));
}

const char* const kClassText = "0 elliptic (every eigenvalue of the block on the unit circle: four zero exponents), "
                               "1 parabolic (every eigenvalue on the circle with a collision: a kink), 2 hyperbolic "
                               "(an eigenvalue off the circle: a positive exponent)";

const BandsSpec& spec_of(const Config& c);

class BandsDiagnostic final : public Diagnostic {
 public:
  std::string table() const override { return "bands"; }

  std::shared_ptr<const DiagnosticSpec> parse(const std::string& text, const std::string& source,
                                              const Config&) const override {
    auto e = std::make_shared<BandsSpec>();
    const Ctx cx(source);
    const DiagnosticTable d = read_diagnostic_table(text, source, "bands");
    if (!d.table) return e;
    const std::string P = "bands";
    const toml::table& t = *d.table;
    cx.only_keys(t, P, {"ring", "bulk", "grid", "max_arcs"});
    e->enabled = true;
    if (const toml::node* n = t.get("ring")) e->ring = cx.boolean(*n, P + ".ring");
    if (const toml::node* n = t.get("bulk")) e->bulk = cx.boolean(*n, P + ".bulk");
    if (const toml::node* n = t.get("grid")) {
      e->grid = cx.integer(*n, P + ".grid");
      if (e->grid < 2 || e->grid > 1'000'000)
        cx.fail(*n, P + ".grid", std::to_string(e->grid) + " k points is outside 2..1000000 (k = pi j / (grid - 1))");
    }
    if (const toml::node* n = t.get("max_arcs")) {
      e->max_arcs = cx.integer(*n, P + ".max_arcs");
      if (e->max_arcs < 1 || e->max_arcs > 100'000)
        cx.fail(*n, P + ".max_arcs", std::to_string(e->max_arcs) + " is outside 1..100000");
    }
    if (!e->ring && !e->bulk) cx.fail(d.line, P, "ring = false and bulk = false leave nothing to compute");
    return e;
  }

  Schema declare(const Config& c) const override {
    const BandsSpec& e = spec_of(c);
    Schema s;
    s.groups.push_back({kG,
                        "Bloch band structure of translation-invariant circuits: the four exponents of the one-period "
                        "block M(k) at each momentum k (kernels/bloch.hpp), at a periodic ring's allowed momenta and "
                        "in the bulk on a fixed grid, with each block's class; padding for points whose gates are "
                        "not translation-invariant or are redrawn in time, and (ring) for open chains",
                        {AttrDecl::of("classes", std::string(kClassText))}});
    s.coords.push_back(index_axis(kBand, 4, "index j of the block's four exponents, descending (+- paired)"));
    if (e.ring) {
      s.coords.push_back(index_axis(kMom, std::max<std::int64_t>(largest_lattice(c) / 2, 1),
                                    "index m of a ring momentum k_m = 2 pi m / (L/2), m = 0 .. L/2 - 1"));
      s.fields.push_back(field("ring_k", Elem::F64, {kMom}, {true}, "rad", "momentum k_m = 2 pi m / (L/2) of the ring"));
      s.fields.push_back(field("ring_exponents", Elem::F64, {kMom, kBand}, {true, false}, "1/period",
                               "the four exponents ln|mu| of the block at k_m, descending; their union over m is "
                               "the ring's Lyapunov spectrum (/chaos/exponents of a bloch point)"));
      s.fields.push_back(field("ring_errors", Elem::F64, {kMom, kBand}, {true, false}, "1/period",
                               "estimated absolute error of each ring exponent (0 for an exact zero)"));
      s.fields.push_back(field("ring_class", Elem::I64, {kMom}, {true}, "1",
                               std::string("class of the block at k_m: ") + kClassText));
    }
    if (e.bulk) {
      CoordDecl k;
      k.path = kK;
      k.type = Elem::F64;
      k.dims = {kK};
      for (std::int64_t j = 0; j < e.grid; ++j)
        k.f.push_back(j + 1 == e.grid ? kPi : kPi * static_cast<double>(j) / static_cast<double>(e.grid - 1));
      k.units = "rad";
      k.meaning = "momentum k of the bulk grid, pi j / (grid - 1) (the exponents at -k are the same)";
      s.coords.push_back(std::move(k));
      s.coords.push_back(index_axis(kArc, e.max_arcs, "index of an arc of [0, pi] between kinks (capacity bands.max_arcs)"));
      s.coords.push_back(index_axis(kKink, e.max_arcs + 1, "index of a kink (capacity bands.max_arcs + 1)"));
      s.fields.push_back(field("bulk_exponents", Elem::F64, {kK, kBand}, {false, false}, "1/period",
                               "the four exponents of the block at k on the grid, descending; exact zeros on "
                               "arcs whose eigenvalues lie on the unit circle"));
      s.fields.push_back(field("bulk_errors", Elem::F64, {kK, kBand}, {false, false}, "1/period",
                               "estimated absolute error of each bulk exponent (0 for an exact zero)"));
      s.fields.push_back(field("bulk_class", Elem::I64, {kK}, {false}, "1",
                               std::string("class of the block at k: ") + kClassText));
      s.fields.push_back(field("arc_lo", Elem::F64, {kArc}, {true}, "rad", "lower end of each arc of [0, pi] between kinks"));
      s.fields.push_back(field("arc_hi", Elem::F64, {kArc}, {true}, "rad", "upper end of each arc"));
      s.fields.push_back(field("arc_on_circle", Elem::I64, {kArc}, {true}, "1",
                               "eigenvalues of the block on the unit circle along the arc (0, 2 or 4; exact)"));
      s.fields.push_back(field("arc_class", Elem::I64, {kArc}, {true}, "1",
                               "class of the arc: 0 elliptic (four on the circle), 2 hyperbolic (otherwise)"));
      s.fields.push_back(field("kinks", Elem::F64, {kKink}, {true}, "rad",
                               "the kinks in [0, pi] (a pair of eigenvalues collides on the circle): the parabolic "
                               "momenta, ascending"));
      s.fields.push_back(field("elliptic_fraction", Elem::F64, {}, {}, "1",
                               "total length of the elliptic arcs / pi: the share of the Brillouin zone where every "
                               "exponent is exactly zero",
                               "bands_elliptic_fraction"));
    }
    s.fields.push_back(field("exact", Elem::I64, {}, {}, "1",
                             "1: zeros and classes decided exactly (kernels/bloch_exact.hpp); 0: by the error "
                             "estimate (the exact analysis failed); -1 not computed"));
    return s;
  }

  DiagnosticOutput compute(const Config& c, const Point& p, const PointRecord&, MPI_Comm group) const override {
    DiagnosticOutput out;
    int rank = 0;
    MPI_Comm_rank(group, &rank);
    if (rank != 0) return out;
    const BandsSpec& e = spec_of(c);
    const std::size_t nf = declare(c).fields.size();
    out.fields.resize(nf);
    std::size_t at = 0;
    auto put_f = [&](std::vector<std::int64_t> shape, std::vector<double> v) {
      out.fields[at].shape = std::move(shape);
      out.fields[at++].f = std::move(v);
    };
    auto put_i = [&](std::vector<std::int64_t> shape, std::vector<std::int64_t> v) {
      out.fields[at].shape = std::move(shape);
      out.fields[at++].i = std::move(v);
    };
    try {
      const GateSource gs = gate_source(c, p);
      if (!gs.translation_invariant || !gs.time_periodic) return out;  // padding: no bands
      bool exact = true;
      if (e.ring) {
        if (gs.boundary == Boundary::Periodic && gs.L % 2 == 0) {
          const Bands b = ring_bands(materialize(gs));
          exact = exact && b.exact;
          const auto n = static_cast<std::int64_t>(b.k.size());
          put_f({n}, b.k);
          put_f({n, 4}, b.exponents);
          put_f({n, 4}, b.errors);
          put_i({n}, std::vector<std::int64_t>(b.classes.begin(), b.classes.end()));
        } else {
          at += 4;  // an open chain has no momenta: padding
        }
      }
      if (e.bulk) {
        GateSource cell = gs;  // the bulk depends on the gates only: a two-site ring carries them
        cell.L = 2;
        cell.boundary = Boundary::Periodic;
        const Circuit cc = materialize(cell);
        std::vector<double> ks;
        for (std::int64_t j = 0; j < e.grid; ++j)
          ks.push_back(j + 1 == e.grid ? kPi : kPi * static_cast<double>(j) / static_cast<double>(e.grid - 1));
        const Bands b = bulk_bands(cc, ks);
        exact = exact && b.exact;
        put_f({e.grid, 4}, b.exponents);
        put_f({e.grid, 4}, b.errors);
        put_i({e.grid}, std::vector<std::int64_t>(b.classes.begin(), b.classes.end()));
        if (b.exact) {
          BandArcs a = band_arcs(cc);
          auto na = static_cast<std::int64_t>(a.lo.size());
          double elliptic = 0;
          for (std::size_t i = 0; i < a.lo.size(); ++i)
            if (a.classes[i] == static_cast<int>(BlockClass::Elliptic)) elliptic += a.hi[i] - a.lo[i];
          if (na > e.max_arcs || static_cast<std::int64_t>(a.kinks.size()) > e.max_arcs + 1) {
            std::ostringstream os;
            os << na << " arcs exceed bands.max_arcs = " << e.max_arcs << " (stored: the first " << e.max_arcs << ")";
            out.failure = os.str();
            na = std::min(na, e.max_arcs);
            a.kinks.resize(std::min<std::size_t>(a.kinks.size(), static_cast<std::size_t>(e.max_arcs + 1)));
          }
          const auto cut = [&](const auto& v) { return std::vector(v.begin(), v.begin() + na); };
          put_f({na}, cut(a.lo));
          put_f({na}, cut(a.hi));
          put_i({na}, std::vector<std::int64_t>(a.on_circle.begin(), a.on_circle.begin() + na));
          put_i({na}, std::vector<std::int64_t>(a.classes.begin(), a.classes.begin() + na));
          put_f({static_cast<std::int64_t>(a.kinks.size())}, a.kinks);
          put_f({}, {elliptic / kPi});
        } else {
          at += 6;  // no exact arcs: padding (`exact` says why the classes are numerical)
        }
      }
      put_i({}, {exact ? 1 : 0});
    } catch (const std::exception& ex) {
      out.failure = ex.what();
    }
    return out;
  }

  DiagnosticEstimate estimate(const Config& c, const Point& p) const override {
    // The computation is cheap (a few 4x4 eigenproblems per momentum and one
    // exact analysis of the gates): time it on the point itself.
    const BandsSpec& e = spec_of(c);
    return timed_estimate(*this, c, p,
                          8.0 * (10.0 * static_cast<double>(p.L) + 9.0 * static_cast<double>(e.grid) +
                                 5.0 * static_cast<double>(e.max_arcs)));
  }

  void print_text(std::ostream& os, const Config& c, const std::vector<FieldValue>& v) const override {
    const BandsSpec& e = spec_of(c);
    const Schema s = declare(c);
    auto value = [&](const std::string& name) -> const FieldValue& {
      static const FieldValue none;
      const std::int64_t k = s.field_index(kG + "/" + name);
      return k >= 0 && static_cast<std::size_t>(k) < v.size() ? v[static_cast<std::size_t>(k)] : none;
    };
    const char* names[] = {"elliptic", "parabolic", "hyperbolic"};
    os << "  bands (Bloch blocks, classed elliptic / parabolic / hyperbolic by their eigenvalue moduli):\n";
    if (e.ring) {
      const FieldValue& cls = value("ring_class");
      if (cls.empty()) {
        os << "    ring: none (not a translation-invariant periodic ring)\n";
      } else {
        int count[3] = {0, 0, 0};
        for (auto x : cls.i)
          if (x >= 0 && x <= 2) ++count[x];
        os << "    ring: " << cls.i.size() << " momenta: " << count[0] << " elliptic, " << count[1] << " parabolic, "
           << count[2] << " hyperbolic\n";
      }
    }
    if (e.bulk) {
      const FieldValue &lo = value("arc_lo"), &hi = value("arc_hi"), &ac = value("arc_class"), &ex = value("bulk_exponents"),
                       &kinks = value("kinks"), &frac = value("elliptic_fraction");
      if (ex.empty()) {
        os << "    bulk: none (gates not translation-invariant or redrawn in time)\n";
        return;
      }
      double top = 0, at = 0;
      for (std::int64_t j = 0; j < e.grid; ++j)
        if (ex.f[static_cast<std::size_t>(4 * j)] > top) {
          top = ex.f[static_cast<std::size_t>(4 * j)];
          at = kPi * static_cast<double>(j) / static_cast<double>(e.grid - 1);
        }
      os << "    bulk on " << e.grid << " k in [0, pi]: largest exponent " << num(top) << " at k = " << num(at, 4) << "\n";
      if (!lo.empty()) {
        os << "    arcs:";
        for (std::size_t i = 0; i < lo.f.size(); ++i)
          os << " (" << num(lo.f[i], 4) << ", " << num(hi.f[i], 4) << ") " << names[std::clamp<std::int64_t>(ac.i[i], 0, 2)]
             << (i + 1 < lo.f.size() ? ";" : "");
        os << "\n    kinks (parabolic):";
        for (double k : kinks.f) os << ' ' << num(k, 6);
        if (kinks.f.empty()) os << " none";
        os << "\n    elliptic fraction of the zone: " << num(frac.f.empty() ? kNaN : frac.f[0], 6) << "\n";
      }
    }
  }
};

const BandsDiagnostic& instance() {
  static const BandsDiagnostic d;
  return d;
}

const BandsSpec& spec_of(const Config& c) {
  return static_cast<const BandsSpec&>(diagnostic_spec(c, instance()));
}

}  // namespace

const Diagnostic& bands_diagnostic() { return instance(); }

}  // namespace toral
