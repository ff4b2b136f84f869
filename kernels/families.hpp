// Integer-parameter gate families and counter-based random draws of their
// parameters. Pure functions: no state, no I/O.
#pragma once
#include <cstdint>
#include <map>
#include <string>
#include <vector>

#include "intmat.hpp"

namespace toral {

// A family maps named integer parameters to a 2x2 matrix of det 1.
struct Family {
  std::string name;
  std::vector<std::string> params;  // parameter names, in order
  std::string formula;              // human-readable definition
};

// The families toral knows. "shear2": G(a, b) = [[1, a], [0, 1]] [[1, 0], [b, 1]]
// = [[1 + ab, a], [b, 1]]. "cat": C(a, b) = [[a, 1], [a b - 1, b]] (trace a + b).
const std::vector<Family>& families();
const Family* find_family(const std::string& name);

// Evaluates a family (values in the order of Family::params), overflow-checked.
Mat2 family_matrix(const std::string& name, const std::vector<std::int64_t>& values);

// Counter-based uniform integer in [lo, hi] (inclusive), Philox4x64-10 from
// Random123 keyed by (seed, point_key) with counter (slot, index, tag).
// The draw depends on nothing else: not on rank, order or count of draws.
std::int64_t draw_uniform(std::uint64_t seed, std::uint64_t point_key, std::uint64_t slot,
                          std::uint64_t index, std::uint64_t tag, std::int64_t lo, std::int64_t hi);

// FNV-1a 64-bit hash, used to key streams by a point's canonical description.
std::uint64_t fnv1a64(const std::string& s);

}  // namespace toral
