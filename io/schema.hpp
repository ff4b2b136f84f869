// The declared per-point schema of a run's diagnostics (docs/layout.md,
// "Diagnostic datasets"). A diagnostic (driver/diagnostic.hpp) declares the
// groups, coordinates and per-point fields it writes; the result writer and
// reader, the journal, merge, /stats, `toral point --json` and `toral check`
// loop over this declaration and never name a diagnostic's fields.
//
// Plain data, no MPI, no HDF5: the schema travels as canonical text (root
// attribute `schema` of the result file) and its hash (root attribute
// `schema_hash`, the journal header).
#pragma once
#include <cstdint>
#include <string>
#include <vector>

namespace toral {

// Element type of a coordinate or field. Float fields pad with NaN, integer
// fields with -1.
enum class Elem : std::int32_t { F64 = 0, I64 = 1 };

// An attribute of a group, coordinate or field.
struct AttrDecl {
  enum class Kind : std::int32_t { Text = 0, Int = 1, Real = 2 };
  std::string name;
  Kind kind = Kind::Text;
  std::string text;
  std::int64_t i = 0;
  double d = 0;
  static AttrDecl of(std::string n, std::string v) { return {std::move(n), Kind::Text, std::move(v), 0, 0}; }
  static AttrDecl of(std::string n, std::int64_t v) { return {std::move(n), Kind::Int, {}, v, 0}; }
  static AttrDecl of(std::string n, double v) { return {std::move(n), Kind::Real, {}, 0, v}; }
  bool operator==(const AttrDecl&) const = default;
};

// A group the diagnostic creates (parents before children). `meaning` is
// written as the attribute of that name.
struct GroupDecl {
  std::string path;  // absolute, e.g. "/entanglement/gaussian"
  std::string meaning;
  std::vector<AttrDecl> attrs;
  bool operator==(const GroupDecl&) const = default;
};

// A run-level dataset (written once, not per point). A 1-D coordinate whose
// dims are {its own path} is an axis: an HDF5 dimension scale named after its
// last path component, which per-point fields (and other coordinates) name
// in their dims. Other coordinates (e.g. a 2-D table of region sites) name
// existing axes.
struct CoordDecl {
  std::string path;
  Elem type = Elem::I64;
  std::vector<std::string> dims;  // axis paths, outermost first
  std::vector<double> f;          // values (row-major) when F64
  std::vector<std::int64_t> i;    // values when I64
  std::string units, meaning;
  std::vector<AttrDecl> attrs;
  bool is_axis() const { return dims.size() == 1 && dims[0] == path; }
  std::size_t size() const { return type == Elem::F64 ? f.size() : i.size(); }
  bool operator==(const CoordDecl&) const = default;
};

// A per-point dataset: shape (P, dims...) in the file. A dim marked ragged
// may be shorter for a point (its value has a smaller extent there; the rest
// of the row is padding). `stats`, when not empty, is the /stats column that
// summarises it (F64 only).
struct FieldDecl {
  std::string path;
  Elem type = Elem::F64;
  std::vector<std::string> dims;  // axis paths after the point axis
  std::vector<bool> ragged;       // per dim (empty: none ragged)
  std::string units, meaning;
  std::string stats;
  std::vector<AttrDecl> attrs;
  bool is_ragged(std::size_t d) const { return d < ragged.size() && ragged[d]; }
  bool operator==(const FieldDecl&) const = default;
};

struct Schema {
  std::vector<GroupDecl> groups;
  std::vector<CoordDecl> coords;
  std::vector<FieldDecl> fields;

  bool empty() const { return groups.empty() && coords.empty() && fields.empty(); }
  // Appends another diagnostic's declaration.
  void append(const Schema& o);
  // The axis coordinate at `path`, or nullptr.
  const CoordDecl* axis(const std::string& path) const;
  // Index of the field at `path`, or -1.
  std::int64_t field_index(const std::string& path) const;
  // The full inner shape of field k (axis lengths of its dims).
  std::vector<std::int64_t> inner_shape(std::size_t k) const;
  // "" when consistent, else one line saying what is wrong: unique absolute
  // paths under a declared group, axes declared before use and visible from
  // the dataset (in its group or an ancestor, as netCDF requires), coordinate
  // sizes matching their dims, ragged flags per dim, stats only on F64.
  std::string validate() const;
  // Canonical text: equal schemas give equal text; parse(text()) == *this.
  std::string text() const;
  // Inverse of text(); throws std::runtime_error on malformed text.
  static Schema parse(const std::string& text);
  // 16 hex digits: FNV-1a-64 of text() ("" for an empty schema).
  std::string hash() const;
  bool operator==(const Schema&) const = default;
};

// One point's value of one field: `shape` has one extent per dim of the
// field (each at most the axis length, equal to it where the dim is not
// ragged), the data are row-major over `shape`. Empty data: not computed
// (the whole row is padding in the file); a value with a zero extent (a
// ragged dim of length 0) also has no data and is all padding in the file,
// so it reads back as not computed.
struct FieldValue {
  std::vector<std::int64_t> shape;
  std::vector<double> f;
  std::vector<std::int64_t> i;
  bool empty() const { return f.empty() && i.empty(); }
  bool operator==(const FieldValue& o) const;  // bitwise on doubles (NaN == NaN)
};

// Checks one value against field k of `s`: "" or what is wrong.
std::string check_value(const Schema& s, std::size_t k, const FieldValue& v);

// Pads `v` (of field k) to the full inner shape: F64 with NaN, I64 with -1.
// An empty value gives a whole row of padding. `out` receives
// prod(inner_shape(k)) elements of the field's type.
void pad_value(const Schema& s, std::size_t k, const FieldValue& v, std::vector<double>& outf,
               std::vector<std::int64_t>& outi);

// Inverse of pad_value for one row: all padding gives an empty value; else
// the full shape, with every ragged dim cut after its last index that holds
// a value (not NaN / not -1) anywhere in the row.
FieldValue unpad_row(const Schema& s, std::size_t k, const double* rowf, const std::int64_t* rowi);

}  // namespace toral
