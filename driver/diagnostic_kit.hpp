// Small shared pieces for the diagnostics' driver files (driver/<name>.cpp):
// reading the diagnostic's own config table with located errors, and the
// declaration helpers for its coordinates and fields (io/schema.hpp).
// Only diagnostic driver files include this (it pulls in toml++ and
// config_ctx.hpp).
#pragma once
#include <toml++/toml.h>

#include <algorithm>
#include <chrono>
#include <cstdint>
#include <string>
#include <vector>

#include "config_ctx.hpp"
#include "diagnostic.hpp"
#include "schema.hpp"

namespace toral {

// A diagnostic's table read from the config text: `table` is null when the
// table is absent. parse_config has reported syntax errors already; a
// table key that is not a table is a ConfigError "SOURCE:LINE: name: must be
// a table, not ...". The root owns the nodes `table` points into.
struct DiagnosticTable {
  toml::table root;
  const toml::table* table = nullptr;
  std::int64_t line = 0;  // the line of the table's header
};

inline DiagnosticTable read_diagnostic_table(const std::string& text, const std::string& source,
                                             const std::string& name) {
  const Ctx cx(source);
  DiagnosticTable d;
  try {
    d.root = toml::parse(text, source);
  } catch (const toml::parse_error& err) {
    cx.fail(static_cast<std::int64_t>(err.source().begin.line), "",
            std::string("TOML syntax: ") + std::string(err.description()));
  }
  const toml::node* node = d.root.get(name);
  if (!node) return d;
  if (!node->is_table()) cx.fail(*node, name, std::string("must be a table, not ") + Ctx::type_name(*node));
  d.table = node->as_table();
  d.line = Ctx::line(*node);
  return d;
}

// A 1-D integer axis 0, step, 2 step, ... (n values) at `path`.
inline CoordDecl index_axis(const std::string& path, std::int64_t n, const std::string& units,
                            const std::string& meaning, std::int64_t step = 1) {
  CoordDecl c;
  c.path = path;
  c.type = Elem::I64;
  c.dims = {path};
  for (std::int64_t k = 0; k < n; ++k) c.i.push_back(k * step);
  c.units = units;
  c.meaning = meaning;
  return c;
}

// A 1-D integer axis with the given values at `path`.
inline CoordDecl int_axis(const std::string& path, std::vector<std::int64_t> values, const std::string& units,
                          const std::string& meaning) {
  CoordDecl c;
  c.path = path;
  c.type = Elem::I64;
  c.dims = {path};
  c.i = std::move(values);
  c.units = units;
  c.meaning = meaning;
  return c;
}

// A 1-D float axis with the given values at `path`.
inline CoordDecl value_axis(const std::string& path, std::vector<double> values, const std::string& units,
                            const std::string& meaning) {
  CoordDecl c;
  c.path = path;
  c.type = Elem::F64;
  c.dims = {path};
  c.f = std::move(values);
  c.units = units;
  c.meaning = meaning;
  return c;
}

// A per-point field at `path` with the given axes (after the point axis);
// `ragged` flags the axes whose extent varies per point (empty: none).
inline FieldDecl field_decl(std::string path, Elem type, std::vector<std::string> dims, std::vector<bool> ragged,
                            std::string units, std::string meaning, std::string stats = {}) {
  FieldDecl f;
  f.path = std::move(path);
  f.type = type;
  f.dims = std::move(dims);
  if (std::find(ragged.begin(), ragged.end(), true) != ragged.end()) f.ragged = std::move(ragged);
  f.units = std::move(units);
  f.meaning = std::move(meaning);
  f.stats = std::move(stats);
  return f;
}

// One-value FieldValues for compute().
inline FieldValue scalar_value(double x) {
  FieldValue f;
  f.f = {x};
  return f;
}
inline FieldValue scalar_value(std::int64_t x) {
  FieldValue f;
  f.i = {x};
  return f;
}

// `toral check` for a cheap diagnostic: time its compute on the point itself
// (one rank), with the given working memory.
inline DiagnosticEstimate timed_estimate(const Diagnostic& d, const Config& c, const Point& p, double bytes) {
  const auto t0 = std::chrono::steady_clock::now();
  (void)d.compute(c, p, PointRecord{}, MPI_COMM_SELF);
  DiagnosticEstimate e;
  e.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  e.bytes = bytes;
  return e;
}

}  // namespace toral
