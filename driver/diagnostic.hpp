// The diagnostic interface: one per-point computation beyond the spectrum
// (exact entanglement dynamics, ...), declared in one place. A diagnostic
// lives in one driver file beside its kernel and is listed, one line, in the
// registry (driver/diagnostics.cpp). Everything downstream — the result
// writer and reader, validation, the journal, merge, /stats, `toral point
// --json` and `toral check` — loops over what it declares and never names its
// fields (DEVELOPERS.md, "How to add a diagnostic").
//
// Included by config.hpp (Config holds the parsed specs), so this header
// must not include config.hpp or sweep.hpp.
#pragma once
#include <mpi.h>

#include <cstdint>
#include <memory>
#include <ostream>
#include <string>
#include <vector>

#include "record.hpp"
#include "schema.hpp"

namespace toral {

struct Config;
struct Point;

// A diagnostic's parsed config table. Each diagnostic derives its own spec
// from this and reads it back with a static_cast of the entry of
// Config::diagnostics at its registry position.
struct DiagnosticSpec {
  virtual ~DiagnosticSpec() = default;
  bool enabled = false;  // the table is present: the diagnostic runs and writes
};

// What `toral check` prints for one point: seconds and bytes.
struct DiagnosticEstimate {
  double seconds = 0, bytes = 0;
};

// The outcome of one point: one value per declared field (in declaration
// order; an empty value is padding), and a failure to report ("" when none).
// A failure turns an ok point into status diagnostic_failed with the message
// "<table>: <failure>"; the values are kept.
struct DiagnosticOutput {
  std::vector<FieldValue> fields;
  std::string failure;
};

class Diagnostic {
 public:
  virtual ~Diagnostic() = default;
  // The config table it reads ("entanglement" for [entanglement]); also the
  // prefix of its failure messages and its column in `toral check`.
  virtual std::string table() const = 0;
  // Parses the table from the config text (parse_config has already read
  // the rest of it into `c`, sweeps included). Absent table: a spec with
  // enabled = false. Bad keys or values throw ConfigError
  // "SOURCE:LINE: table.key: problem" (one line).
  virtual std::shared_ptr<const DiagnosticSpec> parse(const std::string& text, const std::string& source,
                                                      const Config& c) const = 0;
  // Its groups, coordinates and per-point fields for this config (called
  // only when enabled). Pure: the same config gives the same schema.
  virtual Schema declare(const Config& c) const = 0;
  // One point, given its upstream results in `r` (exponents, bounds, status).
  // `group` is the point's rank group; every rank of it calls, only rank 0's
  // output is kept. Never throws for the point's own failures.
  virtual DiagnosticOutput compute(const Config& c, const Point& p, const PointRecord& r, MPI_Comm group) const = 0;
  // `toral check`: the time and memory of compute for point p.
  virtual DiagnosticEstimate estimate(const Config& c, const Point& p) const = 0;
  // Ranks it wants for point p (rank groups are sized from the largest
  // request of the spectrum method and the diagnostics).
  virtual int ranks_wanted(const Config&, const Point&) const { return 1; }
  // `toral point`: a short human-readable table of its values (`values`
  // holds one entry per declared field, in declaration order).
  virtual void print_text(std::ostream& os, const Config& c, const std::vector<FieldValue>& values) const = 0;
};

// The registry: every diagnostic, in a fixed order (driver/diagnostics.cpp).
const std::vector<const Diagnostic*>& diagnostics();

// The spec of registry entry k from a parsed config (never null).
const DiagnosticSpec& diagnostic_spec(const Config& c, std::size_t k);
// The spec of diagnostic d (which must be in the registry); a diagnostic
// reads its own back with static_cast<const ItsSpec&>(diagnostic_spec(c, d)).
const DiagnosticSpec& diagnostic_spec(const Config& c, const Diagnostic& d);

// The schema of the enabled diagnostics of `c`, concatenated in registry
// order; `offsets` (when given) receives each diagnostic's first field index
// in it (equal to the next one's when disabled).
Schema run_schema(const Config& c, std::vector<std::size_t>* offsets = nullptr);

// Runs every enabled diagnostic for point p and stores its values in
// r.fields (aligned with run_schema(c)); a failure turns an ok status into
// diagnostic_failed. Only the group leader's record is complete.
void compute_diagnostics(const Config& c, const Point& p, PointRecord& r, MPI_Comm group);

// The largest rank request of the enabled diagnostics for point p (1 when none).
int diagnostic_ranks(const Config& c, const Point& p);

}  // namespace toral
