// The sweep: each [[sweep]] table is a Cartesian product of its scanned
// values; a run is the concatenation of its sweeps' points.
#pragma once
#include <cstdint>
#include <limits>
#include <string>
#include <vector>

#include "config.hpp"
#include "model.hpp"

namespace toral {

// Value stored in /points/<name> where a parameter does not apply to a point.
constexpr std::int64_t kAbsent = std::numeric_limits<std::int64_t>::min();

struct Point {
  std::int64_t index = 0;  // global, 0-based, in expansion order
  int sweep = 0;
  std::int64_t L = 0;
  Boundary boundary = Boundary::Periodic;
  std::int64_t seed = -1;           // -1: nothing drawn
  std::vector<std::int64_t> bond;   // fixed/scanned bond family values (drawn: unused)
  std::vector<std::int64_t> site;   // same for the site family
};

// The parameter table shared by all points: names and meanings for /points/.
struct ParamTable {
  std::vector<std::string> names;
  std::vector<std::string> meanings;
  std::vector<std::string> swept;  // names that take more than one value
};

ParamTable param_table(const Config& c);
// The point's values in ParamTable order (kAbsent where not applicable).
std::vector<std::int64_t> param_values(const Config& c, const ParamTable& t, const Point& p);

std::int64_t point_count(const Config& c);
std::vector<Point> expand(const Config& c);

// Canonical description of a point without its seed (stable under reordering
// the sweep); its hash keys the disorder streams together with the seed.
std::string point_identity(const Config& c, const Point& p);

// The gates of a point, on demand: from matrices or families, drawn
// parameters from the (seed, point identity, bond/site, period) streams.
GateSource gate_source(const Config& c, const Point& p);

// All gates of a point's first period (materialize(gate_source(c, p))).
Circuit build_circuit(const Config& c, const Point& p);

}  // namespace toral
