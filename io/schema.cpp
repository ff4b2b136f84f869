#include "schema.hpp"

#include <algorithm>
#include <charconv>
#include <cmath>
#include <cstring>
#include <set>
#include <stdexcept>

#include "common.hpp"

namespace toral {

namespace {

std::string parent_of(const std::string& p) {
  const auto k = p.rfind('/');
  return k == 0 || k == std::string::npos ? std::string("/") : p.substr(0, k);
}

bool is_ancestor_or_same(const std::string& group, const std::string& of) {
  if (group == "/") return true;
  return of == group || (of.size() > group.size() && of.compare(0, group.size(), group) == 0 &&
                         of[group.size()] == '/');
}

bool good_path(const std::string& p) {
  if (p.size() < 2 || p[0] != '/' || p.back() == '/') return false;
  if (p.find("//") != std::string::npos) return false;
  for (char c : p)
    if (!(std::isalnum(static_cast<unsigned char>(c)) || c == '_' || c == '/')) return false;
  return true;
}

std::int64_t product(const std::vector<std::int64_t>& v) {
  std::int64_t n = 1;
  for (auto x : v) n *= x;
  return n;
}

// ---- canonical text: tab-separated tokens, one object per line; \t, \n and
// \ escaped in strings; doubles in shortest round-trip form.
std::string esc(const std::string& s) {
  std::string o;
  for (char c : s) {
    if (c == '\\') o += "\\\\";
    else if (c == '\t') o += "\\t";
    else if (c == '\n') o += "\\n";
    else o += c;
  }
  return o.empty() ? std::string("\\0") : o;  // "\0": the empty string
}

std::string num(double x) {
  char buf[64];
  auto r = std::to_chars(buf, buf + sizeof buf, x);
  return std::string(buf, r.ptr);
}

struct Out {
  std::string s;
  bool first = true;
  Out& tok(const std::string& t) {
    if (!first) s += '\t';
    s += t;
    first = false;
    return *this;
  }
  Out& str(const std::string& t) { return tok(esc(t)); }
  Out& i(std::int64_t v) { return tok(std::to_string(v)); }
  Out& d(double v) { return tok(num(v)); }
  void end() {
    s += '\n';
    first = true;
  }
};

void put_attrs(Out& o, const std::vector<AttrDecl>& a) {
  o.i(static_cast<std::int64_t>(a.size()));
  for (const auto& x : a) {
    o.str(x.name).i(static_cast<std::int64_t>(x.kind));
    if (x.kind == AttrDecl::Kind::Text) o.str(x.text);
    else if (x.kind == AttrDecl::Kind::Int) o.i(x.i);
    else o.d(x.d);
  }
}

struct In {
  std::vector<std::string> t;
  std::size_t k = 0;
  [[noreturn]] static void bad(const std::string& what) {
    throw std::runtime_error("malformed schema text: " + what);
  }
  const std::string& next() {
    if (k >= t.size()) bad("a line ends early");
    return t[k++];
  }
  std::string str() {
    const std::string& r = next();
    if (r == "\\0") return {};
    std::string o;
    for (std::size_t j = 0; j < r.size(); ++j) {
      if (r[j] != '\\') {
        o += r[j];
        continue;
      }
      if (++j >= r.size()) bad("dangling escape");
      o += r[j] == 't' ? '\t' : r[j] == 'n' ? '\n' : r[j];
    }
    return o;
  }
  std::int64_t i() {
    const std::string& r = next();
    std::int64_t v = 0;
    auto res = std::from_chars(r.data(), r.data() + r.size(), v);
    if (res.ec != std::errc() || res.ptr != r.data() + r.size()) bad("'" + r + "' is not an integer");
    return v;
  }
  std::size_t count() {
    const std::int64_t n = i();
    if (n < 0 || n > (1 << 28)) bad("bad count");
    return static_cast<std::size_t>(n);
  }
  double d() {
    const std::string& r = next();
    double v = 0;
    auto res = std::from_chars(r.data(), r.data() + r.size(), v);
    if (res.ec != std::errc() || res.ptr != r.data() + r.size()) bad("'" + r + "' is not a number");
    return v;
  }
  Elem elem() {
    const std::int64_t e = i();
    if (e != 0 && e != 1) bad("bad element type");
    return static_cast<Elem>(e);
  }
  void done() {
    if (k != t.size()) bad("a line has extra tokens");
  }
};

std::vector<AttrDecl> get_attrs(In& in) {
  std::vector<AttrDecl> a(in.count());
  for (auto& x : a) {
    x.name = in.str();
    const std::int64_t kind = in.i();
    if (kind < 0 || kind > 2) In::bad("bad attribute kind");
    x.kind = static_cast<AttrDecl::Kind>(kind);
    if (x.kind == AttrDecl::Kind::Text) x.text = in.str();
    else if (x.kind == AttrDecl::Kind::Int) x.i = in.i();
    else x.d = in.d();
  }
  return a;
}

std::vector<std::string> split(const std::string& line) {
  std::vector<std::string> t;
  std::size_t a = 0;
  while (true) {
    const auto b = line.find('\t', a);
    t.push_back(line.substr(a, b == std::string::npos ? std::string::npos : b - a));
    if (b == std::string::npos) break;
    a = b + 1;
  }
  return t;
}

bool same_bits(double a, double b) {
  std::uint64_t x, y;
  std::memcpy(&x, &a, 8);
  std::memcpy(&y, &b, 8);
  return x == y;
}

}  // namespace

void Schema::append(const Schema& o) {
  groups.insert(groups.end(), o.groups.begin(), o.groups.end());
  coords.insert(coords.end(), o.coords.begin(), o.coords.end());
  fields.insert(fields.end(), o.fields.begin(), o.fields.end());
}

const CoordDecl* Schema::axis(const std::string& path) const {
  for (const auto& c : coords)
    if (c.path == path && c.is_axis()) return &c;
  return nullptr;
}

std::int64_t Schema::field_index(const std::string& path) const {
  for (std::size_t k = 0; k < fields.size(); ++k)
    if (fields[k].path == path) return static_cast<std::int64_t>(k);
  return -1;
}

std::vector<std::int64_t> Schema::inner_shape(std::size_t k) const {
  std::vector<std::int64_t> s;
  for (const auto& d : fields.at(k).dims) {
    const CoordDecl* a = axis(d);
    s.push_back(a ? static_cast<std::int64_t>(a->size()) : 0);
  }
  return s;
}

std::string Schema::validate() const {
  std::set<std::string> paths, group_paths{"/", "/points"};  // /points: a diagnostic may add a per-point flag there
  auto add = [&](const std::string& p, const char* what) -> std::string {
    if (!good_path(p)) return std::string(what) + " path '" + p + "' is not an absolute path of [A-Za-z0-9_] names";
    if (!paths.insert(p).second) return "path '" + p + "' is declared twice";
    if (!group_paths.count(parent_of(p))) return std::string(what) + " '" + p + "' is not in a declared group";
    return {};
  };
  for (const auto& g : groups) {
    std::string e = add(g.path, "group");
    if (!e.empty()) return e;
    group_paths.insert(g.path);
  }
  std::set<std::string> axes;
  auto dims_ok = [&](const std::string& owner, const std::vector<std::string>& dims) -> std::string {
    for (const auto& d : dims) {
      if (d == owner) continue;
      if (!axes.count(d)) return "'" + owner + "' names axis '" + d + "', which is not declared before it";
      if (!is_ancestor_or_same(parent_of(d), owner))
        return "'" + owner + "' uses axis '" + d + "', which is not in its group or an ancestor group";
    }
    return {};
  };
  for (const auto& c : coords) {
    std::string e = add(c.path, "coordinate");
    if (!e.empty()) return e;
    e = dims_ok(c.path, c.dims);
    if (!e.empty()) return e;
    if (c.dims.empty()) return "coordinate '" + c.path + "' has no dims";
    std::int64_t n = 1;
    for (const auto& d : c.dims) n *= d == c.path ? static_cast<std::int64_t>(c.size()) : static_cast<std::int64_t>(axis(d)->size());
    if (n != static_cast<std::int64_t>(c.size()))
      return "coordinate '" + c.path + "' holds " + std::to_string(c.size()) + " values for " + std::to_string(n);
    if ((c.type == Elem::F64 && !c.i.empty()) || (c.type == Elem::I64 && !c.f.empty()))
      return "coordinate '" + c.path + "' holds values of the other type";
    if (c.is_axis()) axes.insert(c.path);
    else if (std::find(c.dims.begin(), c.dims.end(), c.path) != c.dims.end())
      return "coordinate '" + c.path + "' names itself among several dims";
  }
  for (const auto& f : fields) {
    std::string e = add(f.path, "field");
    if (!e.empty()) return e;
    for (const auto& d : f.dims)
      if (d == f.path) return "field '" + f.path + "' names itself as a dim";
    e = dims_ok(f.path, f.dims);
    if (!e.empty()) return e;
    if (!f.ragged.empty() && f.ragged.size() != f.dims.size())
      return "field '" + f.path + "' has " + std::to_string(f.ragged.size()) + " ragged flags for " +
             std::to_string(f.dims.size()) + " dims";
    if (!f.stats.empty() && f.type != Elem::F64) return "field '" + f.path + "' is summarised in /stats but not float64";
    if (f.stats.find('/') != std::string::npos) return "field '" + f.path + "': stats column '" + f.stats + "' contains '/'";
  }
  std::set<std::string> cols;
  for (const auto& f : fields)
    if (!f.stats.empty() && !cols.insert(f.stats).second) return "stats column '" + f.stats + "' is declared twice";
  return {};
}

std::string Schema::text() const {
  Out o;
  o.str("toral-schema").i(1);
  o.end();
  for (const auto& g : groups) {
    o.str("group").str(g.path).str(g.meaning);
    put_attrs(o, g.attrs);
    o.end();
  }
  for (const auto& c : coords) {
    o.str("coord").str(c.path).i(static_cast<std::int64_t>(c.type)).i(static_cast<std::int64_t>(c.dims.size()));
    for (const auto& d : c.dims) o.str(d);
    o.str(c.units).str(c.meaning).i(static_cast<std::int64_t>(c.size()));
    if (c.type == Elem::F64)
      for (double x : c.f) o.d(x);
    else
      for (auto x : c.i) o.i(x);
    put_attrs(o, c.attrs);
    o.end();
  }
  for (const auto& f : fields) {
    o.str("field").str(f.path).i(static_cast<std::int64_t>(f.type)).i(static_cast<std::int64_t>(f.dims.size()));
    for (const auto& d : f.dims) o.str(d);
    for (std::size_t d = 0; d < f.dims.size(); ++d) o.i(f.is_ragged(d) ? 1 : 0);
    o.str(f.units).str(f.meaning).str(f.stats);
    put_attrs(o, f.attrs);
    o.end();
  }
  return o.s;
}

Schema Schema::parse(const std::string& text) {
  Schema s;
  std::size_t a = 0;
  bool header = false;
  while (a < text.size()) {
    const auto b = text.find('\n', a);
    if (b == std::string::npos) In::bad("no final newline");
    In in{split(text.substr(a, b - a))};
    a = b + 1;
    const std::string kind = in.str();
    if (!header) {
      if (kind != "toral-schema" || in.i() != 1) In::bad("not a toral schema of version 1");
      header = true;
    } else if (kind == "group") {
      GroupDecl g;
      g.path = in.str();
      g.meaning = in.str();
      g.attrs = get_attrs(in);
      s.groups.push_back(std::move(g));
    } else if (kind == "coord") {
      CoordDecl c;
      c.path = in.str();
      c.type = in.elem();
      c.dims.resize(in.count());
      for (auto& d : c.dims) d = in.str();
      c.units = in.str();
      c.meaning = in.str();
      const std::size_t n = in.count();
      if (c.type == Elem::F64)
        for (std::size_t j = 0; j < n; ++j) c.f.push_back(in.d());
      else
        for (std::size_t j = 0; j < n; ++j) c.i.push_back(in.i());
      c.attrs = get_attrs(in);
      s.coords.push_back(std::move(c));
    } else if (kind == "field") {
      FieldDecl f;
      f.path = in.str();
      f.type = in.elem();
      f.dims.resize(in.count());
      for (auto& d : f.dims) d = in.str();
      bool any = false;
      std::vector<bool> rg;
      for (std::size_t d = 0; d < f.dims.size(); ++d) {
        rg.push_back(in.i() != 0);
        any = any || rg.back();
      }
      if (any) f.ragged = rg;
      f.units = in.str();
      f.meaning = in.str();
      f.stats = in.str();
      f.attrs = get_attrs(in);
      s.fields.push_back(std::move(f));
    } else {
      In::bad("unknown line kind '" + kind + "'");
    }
    in.done();
  }
  if (!header && !text.empty()) In::bad("no header");
  return s;
}

std::string Schema::hash() const { return empty() ? std::string() : config_hash_of(text()); }

bool FieldValue::operator==(const FieldValue& o) const {
  if (shape != o.shape || i != o.i || f.size() != o.f.size()) return false;
  for (std::size_t k = 0; k < f.size(); ++k)
    if (!same_bits(f[k], o.f[k])) return false;
  return true;
}

std::string check_value(const Schema& s, std::size_t k, const FieldValue& v) {
  const FieldDecl& fd = s.fields.at(k);
  // No values: not computed (no shape), or a value with a zero extent (a
  // ragged dim of length 0, e.g. no kinks), which is all padding in the file.
  if (v.empty() && (v.shape.empty() || product(v.shape) != 0)) return v.shape.empty() ? std::string() : fd.path + ": a shape without values";
  if ((fd.type == Elem::F64 && !v.i.empty()) || (fd.type == Elem::I64 && !v.f.empty()))
    return fd.path + ": values of the wrong element type";
  const std::vector<std::int64_t> full = s.inner_shape(k);
  if (v.shape.size() != full.size())
    return fd.path + ": shape has " + std::to_string(v.shape.size()) + " extents for " + std::to_string(full.size()) + " dims";
  for (std::size_t d = 0; d < full.size(); ++d) {
    if (v.shape[d] < 0 || v.shape[d] > full[d] || (!fd.is_ragged(d) && v.shape[d] != full[d]))
      return fd.path + ": extent " + std::to_string(v.shape[d]) + " of dim " + fd.dims[d] + " (length " +
             std::to_string(full[d]) + (fd.is_ragged(d) ? ", ragged" : "") + ")";
  }
  const std::int64_t n = product(v.shape);
  const std::size_t have = fd.type == Elem::F64 ? v.f.size() : v.i.size();
  if (static_cast<std::int64_t>(have) != n)
    return fd.path + ": " + std::to_string(have) + " values for shape of " + std::to_string(n);
  return {};
}

void pad_value(const Schema& s, std::size_t k, const FieldValue& v, std::vector<double>& outf,
               std::vector<std::int64_t>& outi) {
  const FieldDecl& fd = s.fields.at(k);
  const std::vector<std::int64_t> full = s.inner_shape(k);
  const std::size_t n = static_cast<std::size_t>(product(full));
  const bool fl = fd.type == Elem::F64;
  if (fl) outf.assign(n, std::nan(""));
  else outi.assign(n, -1);
  if (v.empty() || n == 0) return;
  const std::size_t r = full.size();
  if (r == 0) {
    if (fl) outf[0] = v.f[0];
    else outi[0] = v.i[0];
    return;
  }
  // Copy the last axis in runs; iterate the outer indices of v's shape.
  const std::size_t inner = static_cast<std::size_t>(v.shape[r - 1]);
  const std::size_t outer = inner == 0 ? 0 : (fl ? v.f.size() : v.i.size()) / inner;
  std::vector<std::int64_t> idx(r, 0);
  for (std::size_t o = 0; o < outer; ++o) {
    std::size_t dst = 0;
    for (std::size_t d = 0; d + 1 < r; ++d) dst = dst * static_cast<std::size_t>(full[d]) + static_cast<std::size_t>(idx[d]);
    dst *= static_cast<std::size_t>(full[r - 1]);
    if (fl) std::copy_n(v.f.begin() + static_cast<std::ptrdiff_t>(o * inner), inner, outf.begin() + static_cast<std::ptrdiff_t>(dst));
    else std::copy_n(v.i.begin() + static_cast<std::ptrdiff_t>(o * inner), inner, outi.begin() + static_cast<std::ptrdiff_t>(dst));
    for (std::size_t d = r - 1; d-- > 0;) {
      if (++idx[d] < v.shape[d]) break;
      idx[d] = 0;
    }
  }
}

FieldValue unpad_row(const Schema& s, std::size_t k, const double* rowf, const std::int64_t* rowi) {
  const FieldDecl& fd = s.fields.at(k);
  const std::vector<std::int64_t> full = s.inner_shape(k);
  const std::size_t n = static_cast<std::size_t>(product(full));
  const bool fl = fd.type == Elem::F64;
  auto held = [&](std::size_t j) { return fl ? !std::isnan(rowf[j]) : rowi[j] != -1; };
  FieldValue v;
  bool any = false;
  for (std::size_t j = 0; j < n && !any; ++j) any = held(j);
  if (!any) return v;
  const std::size_t r = full.size();
  v.shape = full;
  // Each ragged dim: 1 + the last index holding a value anywhere.
  for (std::size_t d = 0; d < r; ++d) {
    if (!fd.is_ragged(d)) continue;
    std::size_t after = 1;
    for (std::size_t e = d + 1; e < r; ++e) after *= static_cast<std::size_t>(full[e]);
    const std::size_t len = static_cast<std::size_t>(full[d]);
    std::int64_t last = -1;
    for (std::size_t j = 0; j < n; ++j)
      if (held(j)) last = std::max<std::int64_t>(last, static_cast<std::int64_t>((j / after) % len));
    v.shape[d] = last + 1;
  }
  const std::size_t m = static_cast<std::size_t>(product(v.shape));
  if (fl) v.f.resize(m);
  else v.i.resize(m);
  std::vector<std::int64_t> idx(r, 0);
  for (std::size_t o = 0; o < m; ++o) {
    std::size_t src = 0;
    for (std::size_t d = 0; d < r; ++d) src = src * static_cast<std::size_t>(full[d]) + static_cast<std::size_t>(idx[d]);
    if (fl) v.f[o] = rowf[src];
    else v.i[o] = rowi[src];
    for (std::size_t d = r; d-- > 0;) {
      if (++idx[d] < v.shape[d]) break;
      idx[d] = 0;
    }
  }
  return v;
}

}  // namespace toral
