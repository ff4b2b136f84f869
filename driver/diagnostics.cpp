// The registry of diagnostics (driver/diagnostic.hpp) and the loops over it.
// Adding a diagnostic: one line in diagnostics() below.
#include <stdexcept>

#include "config.hpp"
#include "diagnostic.hpp"
#include "entangle.hpp"

namespace toral {

const Diagnostic& bands_diagnostic();      // driver/bands.cpp
const Diagnostic& spreading_diagnostic();  // driver/spreading.cpp
const Diagnostic& vectors_diagnostic();    // driver/vectors.cpp
const Diagnostic& rays_diagnostic();       // driver/rays.cpp
const Diagnostic& transient_diagnostic();  // driver/transient.cpp

const std::vector<const Diagnostic*>& diagnostics() {
  static const std::vector<const Diagnostic*> registry = {
      &entanglement_diagnostic(),  // [entanglement] -> /entanglement (driver/entangle.cpp)
      &bands_diagnostic(),         // [bands] -> /bands (driver/bands.cpp)
      &spreading_diagnostic(),     // [spreading] -> /spreading (driver/spreading.cpp)
      &vectors_diagnostic(),       // [vectors] -> /vectors (driver/vectors.cpp)
      &rays_diagnostic(),          // [rays] -> /rays (driver/rays.cpp)
      &transient_diagnostic(),     // open chains, [transient] -> /transient, /points/convective (driver/transient.cpp)
  };
  return registry;
}

const DiagnosticSpec& diagnostic_spec(const Config& c, std::size_t k) {
  const auto& reg = diagnostics();
  if (k >= reg.size()) throw std::logic_error("diagnostic_spec: no registry entry " + std::to_string(k));
  if (k < c.diagnostics.size() && c.diagnostics[k]) return *c.diagnostics[k];
  // A Config built by hand (tests): the table is absent.
  static const std::vector<std::shared_ptr<const DiagnosticSpec>> absent = [&] {
    std::vector<std::shared_ptr<const DiagnosticSpec>> v;
    for (const Diagnostic* d : reg) v.push_back(d->parse("", "", Config{}));
    return v;
  }();
  return *absent[k];
}

const DiagnosticSpec& diagnostic_spec(const Config& c, const Diagnostic& d) {
  const auto& reg = diagnostics();
  for (std::size_t k = 0; k < reg.size(); ++k)
    if (reg[k] == &d) return diagnostic_spec(c, k);
  throw std::logic_error("diagnostic '" + d.table() + "' missing from the registry (driver/diagnostics.cpp)");
}

Schema run_schema(const Config& c, std::vector<std::size_t>* offsets) {
  Schema s;
  const auto& reg = diagnostics();
  if (offsets) offsets->clear();
  for (std::size_t k = 0; k < reg.size(); ++k) {
    if (offsets) offsets->push_back(s.fields.size());
    if (diagnostic_spec(c, k).enabled) s.append(reg[k]->declare(c));
  }
  if (offsets) offsets->push_back(s.fields.size());
  return s;
}

void compute_diagnostics(const Config& c, const Point& p, PointRecord& r, MPI_Comm group) {
  const auto& reg = diagnostics();
  std::vector<FieldValue> all;
  for (std::size_t k = 0; k < reg.size(); ++k) {
    if (!diagnostic_spec(c, k).enabled) continue;
    const std::size_t want = reg[k]->declare(c).fields.size();
    DiagnosticOutput out = reg[k]->compute(c, p, r, group);
    out.fields.resize(want);  // a non-leader's (or a skipped point's) output is empty: padding
    all.insert(all.end(), std::make_move_iterator(out.fields.begin()), std::make_move_iterator(out.fields.end()));
    if (!out.failure.empty() && r.status == static_cast<std::int32_t>(PointStatus::Ok)) {
      r.status = static_cast<std::int32_t>(PointStatus::DiagnosticFailed);
      r.message = reg[k]->table() + ": " + out.failure;
    }
  }
  r.fields = std::move(all);
}

int diagnostic_ranks(const Config& c, const Point& p) {
  int n = 1;
  const auto& reg = diagnostics();
  for (std::size_t k = 0; k < reg.size(); ++k)
    if (diagnostic_spec(c, k).enabled) n = std::max(n, reg[k]->ranks_wanted(c, p));
  return n;
}

}  // namespace toral
