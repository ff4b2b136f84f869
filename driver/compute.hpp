// One point, start to finish: circuit -> spectrum -> summary -> bounds ->
// record. Runs on one rank; never throws for a point's own failures (they
// become a status and a message in the record).
#pragma once
#include "config.hpp"
#include "record.hpp"
#include "spectrum.hpp"
#include "sweep.hpp"

namespace toral {

// The method `auto` (or the config override) picks for a point, or
// Method::None with the reason in `why`.
Method choose_method(const Config& c, const Circuit& circ, std::string& why);

// Number of cuts the bound regions have at a point (see docs/bounds).
int region_cuts(const Config& c, const Point& p);

PointRecord compute_point(const Config& c, const ParamTable& t, const Point& p);

// A rough cost model (floating-point operations) used by `check`.
double estimated_flops(const Config& c, const Point& p);

}  // namespace toral
