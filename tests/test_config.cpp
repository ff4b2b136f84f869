// Config parsing (strict, located errors), sweep expansion and disorder
// streams that depend only on (seed, point, bond).
#include <gtest/gtest.h>

#include <utility>

#include "config.hpp"
#include "entangle.hpp"
#include "default_config.hpp"
#include "sweep.hpp"
#include "compute.hpp"
#include "errors.hpp"
#include "record.hpp"

using namespace toral;

namespace {

// Expects a ConfigError whose message contains every fragment.
void expect_error(const std::string& text, std::initializer_list<const char*> fragments) {
  try {
    (void)parse_config(text, "t.toml");
    ADD_FAILURE() << "accepted:\n" << text;
  } catch (const ConfigError& e) {
    const std::string m = e.what();
    EXPECT_EQ(m.find('\n'), std::string::npos) << "not one line: " << m;
    for (const char* f : fragments) EXPECT_NE(m.find(f), std::string::npos) << "missing '" << f << "' in: " << m;
  }
}

const char* kBase = R"(
[[sweep]]
sites = [8, 16]
[sweep.bond]
family = "shear2"
a = { from = -1, to = 1 }
b = 1
)";

}  // namespace

TEST(Config, DefaultParsesAndCounts) {
  const Config c = parse_config(kDefaultConfigText, "embedded default");
  ASSERT_EQ(c.sweeps.size(), 3u);
  // 7 x 7 grid + 2 sizes x 2 boundaries x 12 seeds + 4 x 4 kicked grid
  EXPECT_EQ(point_count(c), 49 + 48 + 16);
  EXPECT_EQ(static_cast<std::int64_t>(expand(c).size()), point_count(c));
}

TEST(Config, CartesianProductOrder) {
  const Config c = parse_config(kBase, "t.toml");
  const auto pts = expand(c);
  ASSERT_EQ(pts.size(), 6u);
  EXPECT_EQ(pts[0].L, 8);
  EXPECT_EQ(pts[0].bond, (std::vector<std::int64_t>{-1, 1}));
  EXPECT_EQ(pts[2].bond, (std::vector<std::int64_t>{1, 1}));
  EXPECT_EQ(pts[3].L, 16);
  for (std::size_t i = 0; i < pts.size(); ++i) EXPECT_EQ(pts[i].index, static_cast<std::int64_t>(i));
  const ParamTable t = param_table(c);
  EXPECT_EQ(t.swept, (std::vector<std::string>{"sites", "bond_a"}));
  const auto v = param_values(c, t, pts[4]);
  EXPECT_EQ(v[1], 16);
  EXPECT_EQ(v[3], kAbsent);  // no seed
}

TEST(Config, LocatedErrors) {
  expect_error(std::string(kBase) + "[spectrum]\nmethd = \"dense\"\n", {"t.toml:9", "spectrum.methd", "unknown key"});
  // The exact-zero and accuracy keys: ranges and types, located.
  expect_error(std::string(kBase) + "[spectrum]\ncertify_max = -1\n", {"t.toml:9", "spectrum.certify_max", "0..4096"});
  expect_error(std::string(kBase) + "[spectrum]\ncertify_max = 5000\n", {"t.toml:9", "spectrum.certify_max"});
  expect_error(std::string(kBase) + "[spectrum]\ncertify_max = 1.5\n", {"t.toml:9", "spectrum.certify_max"});
  expect_error(std::string(kBase) + "[spectrum]\nmax_error = 0\n", {"t.toml:9", "spectrum.max_error"});
  expect_error(std::string(kBase) + "[spectrum]\nmax_error = 2.0\n", {"t.toml:9", "spectrum.max_error"});
  expect_error(std::string(kBase) + "[spectrum]\nmax_error = \"tiny\"\n", {"t.toml:9", "spectrum.max_error", "number"});
  {
    const Config ok = parse_config(std::string(kBase) + "[spectrum]\ncertify_max = 0\nmax_error = 1e-9\n", "t.toml");
    EXPECT_EQ(ok.spectrum.certify_max, 0);
    EXPECT_EQ(ok.spectrum.max_error, 1e-9);
    const Config def = parse_config(kBase, "t.toml");
    EXPECT_EQ(def.spectrum.certify_max, 192);
    EXPECT_EQ(def.spectrum.max_error, 1e-6);
  }
  expect_error(R"([[sweep]]
sites = 8
colour = 3
[sweep.bond]
matrix = [[1,1],[0,1]]
)", {"t.toml:3", "sweep[0].colour", "unknown key"});
  expect_error(R"([[sweep]]
sites = "eight"
[sweep.bond]
matrix = [[1,1],[0,1]]
)", {"t.toml:2", "sweep[0].sites", "must be an integer"});
  expect_error(R"([[sweep]]
sites = []
[sweep.bond]
matrix = [[1,1],[0,1]]
)", {"t.toml:2", "empty scan"});
  expect_error(R"([[sweep]]
sites = { from = 10, to = 2, step = 2 }
[sweep.bond]
matrix = [[1,1],[0,1]]
)", {"t.toml:2", "empty scan"});
  expect_error(R"([[sweep]]
sites = 8
[sweep.bond]
matrix = [[2,1],[0,1]]
)", {"t.toml:4", "sweep[0].bond.matrix", "det 2"});
  expect_error(R"([[sweep]]
sites = 8
[sweep.bond]
kind = "symplectic"
matrix = [[1,0,0,0],[0,1,0,0],[0,0,1,0],[1,0,0,1]]
)", {"t.toml:5", "not symplectic"});
  expect_error(R"([[sweep]]
sites = 8
[sweep.site]
matrix = [[1,1],[1,0]]
[sweep.bond]
matrix = [[1,1],[0,1]]
)", {"t.toml:4", "sweep[0].site.matrix", "det -1"});
  expect_error(R"([[sweep]]
sites = [8, 9]
[sweep.bond]
matrix = [[1,1],[0,1]]
)", {"t.toml:2", "L = 9 is odd"});
  expect_error(std::string(kBase) + "[bounds]\nlocal_dims = [2, 1]\n", {"t.toml:9", "N = 1 is below 2"});
  expect_error(R"([[sweep]]
sites = 8
seeds = [1, 2]
[sweep.bond]
matrix = [[1,1],[0,1]]
)", {"t.toml:3", "sweep[0].seeds", "no gate parameter is drawn"});
  expect_error(R"([[sweep]]
sites = 8
[sweep.bond]
family = "shear2"
a = { draw = [-1, 1] }
b = 0
)", {"t.toml:1", "seeds"});
  expect_error(R"([[sweep]]
sites = 8
[sweep.bond]
family = "shear3"
)", {"t.toml:4", "unknown family"});
  expect_error("[[sweep]]\nsites = 8\n[sweep.bond]\nmatrix = [[1,1],[0,1]\n", {"t.toml:4", "TOML syntax"});
  expect_error(R"([[sweep]]
sites = 8
boundary = "open"
[sweep.bond]
matrix = [[1,1],[0,1]]
[spectrum]
method = "bloch"
)", {"t.toml:7", "periodic"});
  expect_error("title = 3\n", {"t.toml:1", "title", "must be a string"});
}

// Config choices are parsed once, into enums (config.hpp); a bad spelling is a
// located error listing the allowed ones. (Source: this project's
// docs/config.md, which names the TOML spellings.)
TEST(Config, ChoicesParseToEnums) {
  const Config def = parse_config(kBase, "t.toml");
  EXPECT_EQ(def.spectrum.method, SpectrumMethod::Auto);
  EXPECT_EQ(def.bounds.placement, Placement::Bulk);
  const std::pair<const char*, SpectrumMethod> methods[] = {{"auto", SpectrumMethod::Auto},
                                                            {"dense", SpectrumMethod::Dense},
                                                            {"krylov", SpectrumMethod::Krylov},
                                                            {"tangent", SpectrumMethod::Tangent}};
  for (const auto& [name, m] : methods) {
    const Config c = parse_config(std::string(kBase) + "[spectrum]\nmethod = \"" + name + "\"\n", "t.toml");
    EXPECT_EQ(c.spectrum.method, m) << name;
    EXPECT_EQ(c.spectrum.method_line, 9) << name;
  }
  for (const auto& [name, pl] : {std::pair{"bulk", Placement::Bulk}, std::pair{"edge", Placement::Edge}}) {
    const Config c = parse_config(std::string(kBase) + "[bounds]\nplacement = \"" + name + "\"\n", "t.toml");
    EXPECT_EQ(c.bounds.placement, pl) << name;
  }
  expect_error(std::string(kBase) + "[spectrum]\nmethod = \"qr\"\n",
               {"t.toml:9", "spectrum.method", "\"qr\" is not one of \"auto\", \"bloch\", \"dense\", \"krylov\", \"tangent\""});
  expect_error(std::string(kBase) + "[spectrum.krylov]\npolicy = \"smallest\"\n",
               {"t.toml:9", "spectrum.krylov.policy", "\"smallest\" is not one of \"auto\", \"largest\", \"shift_invert\""});
  expect_error(std::string(kBase) + "[bounds]\nplacement = \"middle\"\n",
               {"t.toml:9", "bounds.placement", "\"middle\" is not one of \"bulk\", \"edge\""});
}

TEST(Config, OverflowingFamilyRangeIsRejected) {
  expect_error(R"([[sweep]]
sites = 8
[sweep.bond]
family = "shear2"
a = 4000000000
b = 4000000000
)", {"sweep[0].bond", "overflow"});
}

TEST(Sweep, DisorderDependsOnlyOnSeedPointAndBond) {
  // Streams are keyed by (seed, point identity, bond): a point's circuit is
  // the same whatever else the sweep holds and in whatever order.
  const char* one = R"([[sweep]]
name = "d"
sites = 16
seeds = [5]
[sweep.bond]
family = "shear2"
a = { draw = [-2, 2] }
b = 1
)";
  const char* many = R"([[sweep]]
name = "d"
sites = [32, 16, 8]
seeds = [9, 5, 1]
[sweep.bond]
family = "shear2"
a = { draw = [-2, 2] }
b = 1
)";
  const Config c1 = parse_config(one, "one"), c2 = parse_config(many, "many");
  const Circuit x = build_circuit(c1, expand(c1)[0]);
  bool found = false;
  for (const auto& p : expand(c2))
    if (p.L == 16 && p.seed == 5) {
      const Circuit y = build_circuit(c2, p);
      ASSERT_EQ(x.bonds.size(), y.bonds.size());
      for (std::size_t b = 0; b < x.bonds.size(); ++b) EXPECT_TRUE(x.bonds[b] == y.bonds[b]) << b;
      found = true;
    }
  EXPECT_TRUE(found);
  // and the bonds really are disordered, with another seed giving another draw
  EXPECT_FALSE(x.translation_invariant());
  const Circuit z = build_circuit(c2, expand(c2)[1]);  // L = 32, seed 5
  EXPECT_EQ(z.L, 32);
}

TEST(Sweep, RedrawnGatesChangeEveryPeriodFrozenOnesDoNot) {
  // Time-random circuits draw from the period-t stream; frozen ones ignore t.
  const std::string base = R"([[sweep]]
sites = 12
seeds = [3]
DISORDER
[sweep.bond]
family = "shear2"
a = { draw = [-2, 2] }
b = { draw = [-2, 2] }
)";
  auto make = [&](const std::string& d) {
    std::string t = base;
    t.replace(t.find("DISORDER"), 8, d);
    return parse_config(t, "t.toml");
  };
  const Config fr = make("disorder = \"frozen\""), rd = make("disorder = \"redrawn\"");
  const GateSource a = gate_source(fr, expand(fr)[0]), b = gate_source(rd, expand(rd)[0]);
  EXPECT_TRUE(a.time_periodic);
  EXPECT_FALSE(b.time_periodic);
  int changed_frozen = 0, changed_redrawn = 0;
  for (std::int64_t k = 0; k < 12; ++k) {
    changed_frozen += !(a.bond(k, 0) == a.bond(k, 5));
    changed_redrawn += !(b.bond(k, 0) == b.bond(k, 5));
    EXPECT_TRUE(a.bond(k, 0) == b.bond(k, 0));  // period 0 is the frozen draw
  }
  EXPECT_EQ(changed_frozen, 0);
  EXPECT_GT(changed_redrawn, 6);  // 25 gate values: most bonds change
  expect_error(R"([[sweep]]
sites = 8
disorder = "redrawn"
[sweep.bond]
matrix = [[1,1],[0,1]]
)", {"t.toml:3", "needs a drawn gate parameter"});
}

// ---------------------------------------------------------------- [entanglement]

namespace {
// kBase (largest L = 16) plus an [entanglement] table whose first body line is line 9.
std::string ent(const std::string& body) { return std::string(kBase) + "[entanglement]\n" + body; }
}  // namespace

TEST(Config, EntanglementParses) {
  const Config c = parse_config(ent(R"(periods = 20
offset = 2
regions = [1, 3, [7, 0, 5]]
stabilizer_dims = [2, 3, 4]
profile = true
profile_stride = 5
[[entanglement.initial]]
sites = { from = 0, to = 3 }
gaussian = "squeezed"
squeeze = "6/4"
stabilizer = "momentum"
[[entanglement.initial]]
sites = [5]
stabilizer = [1, 1]
[[entanglement.initial]]
sites = 6
gaussian = "squeezed"
squeeze = 2
)"),
                                "t.toml");
  const EntanglementSpec& e = entanglement_spec(c);
  ASSERT_TRUE(e.enabled);
  EXPECT_EQ(e.periods, 20);
  EXPECT_TRUE(e.gaussian);  // the default
  ASSERT_EQ(e.regions.size(), 3u);
  EXPECT_EQ(e.regions[0].sites, (std::vector<std::int64_t>{2}));  // block of 1 at the offset
  EXPECT_EQ(e.regions[1].sites, (std::vector<std::int64_t>{2, 3, 4}));
  EXPECT_EQ(e.regions[2].sites, (std::vector<std::int64_t>{0, 5, 7}));  // explicit sites, sorted
  EXPECT_EQ(e.stabilizer_dims, (std::vector<std::int64_t>{2, 3, 4}));
  ASSERT_EQ(e.initial.size(), 3u);
  EXPECT_TRUE(e.initial[0].gaussian.squeezed);
  EXPECT_EQ(e.initial[0].gaussian.num, 3);  // 6/4 reduced
  EXPECT_EQ(e.initial[0].gaussian.den, 2);
  EXPECT_EQ(e.initial[2].gaussian.num, 2);
  EXPECT_EQ(e.initial[2].gaussian.den, 1);
  const auto g = gaussian_initial(e, 8);
  const auto s = stabilizer_initial(e, 8);
  ASSERT_EQ(g.size(), 8u);
  EXPECT_TRUE(g[3].squeezed);
  EXPECT_FALSE(g[4].squeezed);  // uncovered: vacuum
  EXPECT_EQ(s[0].kind, LocalState::Momentum);
  EXPECT_EQ(s[4].kind, LocalState::Position);  // uncovered: position
  EXPECT_EQ(s[5].kind, LocalState::Line);
  EXPECT_EQ(stabilizer_initial(e, 4).size(), 4u);  // sites beyond a smaller L are dropped
  // the declared schema (driver/diagnostic.hpp): coordinates from the table
  const Schema sc = run_schema(c);
  EXPECT_EQ(sc.validate(), "");
  auto coord = [&](const std::string& path) {
    for (const auto& x : sc.coords)
      if (x.path == path) return x.i;
    ADD_FAILURE() << "no coordinate " << path;
    return std::vector<std::int64_t>{};
  };
  EXPECT_EQ(coord("/entanglement/region_size"), (std::vector<std::int64_t>{1, 3, 3}));
  EXPECT_EQ(coord("/entanglement/region_sites"), (std::vector<std::int64_t>{2, -1, -1, 2, 3, 4, 0, 5, 7}));
  EXPECT_EQ(coord("/entanglement/stabilizer/profile_t"), (std::vector<std::int64_t>{0, 5, 10, 15, 20}));
  EXPECT_EQ(coord("/entanglement/stabilizer/cut").size(), 17u);  // x = 0 .. largest L
  const std::int64_t prof = sc.field_index("/entanglement/stabilizer/profile");
  ASSERT_GE(prof, 0);
  EXPECT_TRUE(sc.fields[static_cast<std::size_t>(prof)].is_ragged(2));
  // absent table: nothing
  EXPECT_FALSE(entanglement_spec(parse_config(kBase, "t.toml")).enabled);
  EXPECT_TRUE(run_schema(parse_config(kBase, "t.toml")).empty());
}

TEST(Config, EntanglementLocatedErrors) {
  // unknown keys, in the table and in an initial block
  expect_error(ent("periods = 4\nregions = [1]\nperods = 3\n"), {"t.toml:11", "entanglement.perods", "unknown key"});
  expect_error(ent("periods = 4\nregions = [1]\n[[entanglement.initial]]\nsites = 0\ncolour = 2\n"),
               {"t.toml:13", "entanglement.initial[0].colour", "unknown key"});
  expect_error("entanglement = 3\n" + std::string(kBase), {"t.toml:1", "entanglement", "must be a table"});
  // periods
  expect_error(ent("regions = [1]\n"), {"t.toml:8", "entanglement", "missing 'periods'"});
  expect_error(ent("periods = -1\nregions = [1]\n"), {"t.toml:9", "entanglement.periods", "outside"});
  expect_error(ent("periods = 2.5\nregions = [1]\n"), {"t.toml:9", "entanglement.periods", "must be an integer"});
  // bad N (stabilizer_dimension_supported: N >= 2), twice the same N
  expect_error(ent("periods = 4\nregions = [1]\nstabilizer_dims = [2, 1]\n"),
               {"t.toml:11", "entanglement.stabilizer_dims", "N = 1 is not supported"});
  expect_error(ent("periods = 4\nregions = [1]\nstabilizer_dims = [3, 3]\n"),
               {"t.toml:11", "entanglement.stabilizer_dims", "listed twice"});
  // bad line: gcd(a, b, N) must be 1 (kernels/stabilizer.hpp) for every N
  expect_error(ent("periods = 4\nregions = [1]\nstabilizer_dims = [2]\n[[entanglement.initial]]\nsites = 0\n"
                   "stabilizer = [2, 4]\n"),
               {"t.toml:14", "entanglement.initial[0].stabilizer", "N = 2"});
  expect_error(ent("periods = 4\nregions = [1]\nstabilizer_dims = [3, 4]\n[[entanglement.initial]]\nsites = 0\n"
                   "stabilizer = [2, 2]\n"),
               {"t.toml:14", "not a valid state for N = 4"});
  expect_error(ent("periods = 4\nregions = [1]\n[[entanglement.initial]]\nsites = 0\nstabilizer = [1]\n"),
               {"t.toml:13", "entanglement.initial[0].stabilizer", "[a, b]"});
  expect_error(ent("periods = 4\nregions = [1]\n[[entanglement.initial]]\nsites = 0\nstabilizer = \"plus\"\n"),
               {"t.toml:13", "\"plus\" is not one of"});
  // bad squeeze: s > 0, a rational of integers, no floats, only with "squeezed"
  for (const char* bad : {"\"0/3\"", "\"-1/2\"", "0"})
    expect_error(ent(std::string("periods = 4\nregions = [1]\n[[entanglement.initial]]\nsites = 0\n"
                                 "gaussian = \"squeezed\"\nsqueeze = ") + bad + "\n"),
                 {"t.toml:14", "entanglement.initial[0].squeeze", "must be > 0"});
  for (const char* bad : {"\"abc\"", "\"3/0\"", "\"1/-2\"", "\"1.5\""})
    expect_error(ent(std::string("periods = 4\nregions = [1]\n[[entanglement.initial]]\nsites = 0\n"
                                 "gaussian = \"squeezed\"\nsqueeze = ") + bad + "\n"),
                 {"t.toml:14", "entanglement.initial[0].squeeze", "not a rational"});
  expect_error(ent("periods = 4\nregions = [1]\n[[entanglement.initial]]\nsites = 0\ngaussian = \"squeezed\"\n"
                   "squeeze = 1.5\n"),
               {"t.toml:14", "no floats"});
  expect_error(ent("periods = 4\nregions = [1]\n[[entanglement.initial]]\nsites = 0\ngaussian = \"squeezed\"\n"),
               {"t.toml:11", "entanglement.initial[0]", "needs 'squeeze'"});
  expect_error(ent("periods = 4\nregions = [1]\n[[entanglement.initial]]\nsites = 0\nsqueeze = \"3/2\"\n"),
               {"t.toml:13", "given but gaussian is not \"squeezed\""});
  expect_error(ent("periods = 4\nregions = [1]\n[[entanglement.initial]]\nsites = 0\ngaussian = \"thermal\"\n"),
               {"t.toml:13", "entanglement.initial[0].gaussian", "\"thermal\""});
  // regions out of range for every point (largest L = 16), bad regions
  expect_error(ent("periods = 4\nregions = [1, [0, 20]]\n"),
               {"t.toml:10", "entanglement.regions[1]", "need L >= 21", "largest L = 16"});
  expect_error(ent("periods = 4\noffset = 10\nregions = [7]\n"),
               {"t.toml:11", "entanglement.regions[0]", "10..16", "need L >= 17"});
  expect_error(ent("periods = 4\nregions = [0]\n"), {"t.toml:10", "entanglement.regions[0]", "below 1"});
  expect_error(ent("periods = 4\nregions = [[1, 1]]\n"), {"t.toml:10", "entanglement.regions[0]", "listed twice"});
  expect_error(ent("periods = 4\nregions = [[-1]]\n"), {"t.toml:10", "negative"});
  expect_error(ent("periods = 4\nregions = [\"all\"]\n"), {"t.toml:10", "entanglement.regions[0]", "a string"});
  expect_error(ent("periods = 4\nregions = 2\n"), {"t.toml:10", "entanglement.regions", "must be a list"});
  expect_error(ent("periods = 4\nregions = []\n"), {"t.toml:10", "empty"});
  expect_error(ent("periods = 4\n"), {"t.toml:8", "missing 'regions'"});
  expect_error(ent("periods = 4\nregions = [1]\noffset = -2\n"), {"t.toml:11", "entanglement.offset", ">= 0"});
  // initial sites: overlapping blocks, beyond every lattice
  expect_error(ent("periods = 4\nregions = [1]\n[[entanglement.initial]]\nsites = {from = 0, to = 3}\n"
                   "[[entanglement.initial]]\nsites = [3, 4]\n"),
               {"t.toml:14", "entanglement.initial[1].sites", "site 3 is already set by entanglement.initial[0]"});
  expect_error(ent("periods = 4\nregions = [1]\n[[entanglement.initial]]\nsites = 16\n"),
               {"t.toml:12", "entanglement.initial[0].sites", "beyond every lattice"});
  expect_error(ent("periods = 4\nregions = [1]\n[[entanglement.initial]]\ngaussian = \"vacuum\"\n"),
               {"t.toml:11", "missing 'sites'"});
  expect_error(ent("periods = 4\nregions = [1]\ninitial = 3\n"), {"t.toml:11", "[[entanglement.initial]]"});
  // what to compute
  expect_error(ent("periods = 4\nregions = [1]\ngaussian = false\n"), {"t.toml:8", "nothing to compute"});
  expect_error(ent("periods = 4\nregions = [1]\ngaussian = 1\n"), {"t.toml:11", "entanglement.gaussian", "true or false"});
  expect_error(ent("periods = 4\nregions = [1]\nprofile = true\n"), {"t.toml:11", "entanglement.profile", "stabilizer_dims"});
  expect_error(ent("periods = 4\nregions = [1]\nstabilizer_dims = 2\nprofile = true\nprofile_stride = 0\n"),
               {"t.toml:13", "entanglement.profile_stride", "at least 1"});
  expect_error(ent("periods = 4\nregions = [1]\nstabilizer_dims = 2\nprofile_stride = 2\n"),
               {"t.toml:12", "profile is not true"});
  // a profile alone needs no regions
  EXPECT_NO_THROW(parse_config(ent("periods = 4\nregions = []\ngaussian = false\nstabilizer_dims = 2\nprofile = true\n"),
                               "t.toml"));
}

// Errors by layer (kernels/errors.hpp): each exception kind becomes its own
// point status, with its message; what is not a documented kernel error is
// an internal error (status 5), never a solver failure.
TEST(Errors, PointStatusByLayer) {
  using toral::PointStatus;
  auto check = [](const std::exception& e, PointStatus want, const std::string& text) {
    const toral::PointFailure f = toral::point_failure(e);
    EXPECT_EQ(static_cast<int>(f.status), static_cast<int>(want)) << e.what();
    EXPECT_NE(f.message.find(text), std::string::npos) << f.message;
  };
  check(toral::OverflowError("int64 overflow in product"), PointStatus::Overflow, "int64 overflow");
  check(toral::ModelError("bond 3: det = 2"), PointStatus::InvalidModel, "bond 3");
  check(toral::InvalidInput("region out of range"), PointStatus::InvalidModel, "region out of range");
  check(toral::SolverError("Krylov-Schur did not converge"), PointStatus::SolverFailed, "solver: Krylov-Schur");
  check(std::logic_error("bloch_spectrum: orbit count"), PointStatus::InternalError, "internal error");
  check(std::bad_alloc(), PointStatus::InternalError, "internal error");
  check(std::runtime_error("something unforeseen"), PointStatus::InternalError, "something unforeseen");
}
