// Config parsing (strict, located errors), sweep expansion and disorder
// streams that depend only on (seed, point, bond).
#include <gtest/gtest.h>

#include "config.hpp"
#include "default_config.hpp"
#include "sweep.hpp"

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
