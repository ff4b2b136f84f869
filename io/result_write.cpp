// The result file writer: write_results (the collective orchestration:
// broadcast of rank 0's metadata, validation, coverage, the temporary file
// and its atomic publication) and write_file with the /points, /chaos,
// /limit and /bounds writers, the diagnostics as their schema declares them
// (write_diagnostics), the dimension scales and /stats.
#include <algorithm>
#include <cstdio>
#include <limits>
#include <map>
#include <set>
#include <numeric>
#include <string>
#include <type_traits>
#include <utility>
#include <vector>

#include "atomic_file.hpp"
#include "h5.hpp"
#include "result_internal.hpp"

#ifndef TORAL_VERSION
#define TORAL_VERSION "unknown"
#endif

namespace toral {

namespace {

using result_detail::comm_rank;
using result_detail::comm_size;
using result_detail::row_of;

// ---------------------------------------------------------------- MPI helpers

void bcast(MPI_Comm c, std::string& s) {
  long long n = static_cast<long long>(s.size());
  MPI_Bcast(&n, 1, MPI_LONG_LONG, 0, c);
  s.resize(static_cast<std::size_t>(n));
  // Strings here are small (config text at most); one message is enough.
  if (n > 0) MPI_Bcast(s.data(), static_cast<int>(n), MPI_CHAR, 0, c);
}
void bcast(MPI_Comm c, std::vector<std::string>& v) {
  long long n = static_cast<long long>(v.size());
  MPI_Bcast(&n, 1, MPI_LONG_LONG, 0, c);
  v.resize(static_cast<std::size_t>(n));
  for (auto& s : v) bcast(c, s);
}
void bcast(MPI_Comm c, std::vector<std::int64_t>& v) {
  long long n = static_cast<long long>(v.size());
  MPI_Bcast(&n, 1, MPI_LONG_LONG, 0, c);
  v.resize(static_cast<std::size_t>(n));
  if (n > 0) MPI_Bcast(v.data(), static_cast<int>(n), MPI_INT64_T, 0, c);
}
// Numeric vectors of any length (sent in chunks of at most 2^28 elements).
template <class T>
void bcast_numbers(MPI_Comm c, std::vector<T>& v, MPI_Datatype type) {
  long long n = static_cast<long long>(v.size());
  MPI_Bcast(&n, 1, MPI_LONG_LONG, 0, c);
  v.resize(static_cast<std::size_t>(n));
  const std::size_t chunk = std::size_t{1} << 28;
  for (std::size_t off = 0; off < v.size(); off += chunk)
    MPI_Bcast(v.data() + off, static_cast<int>(std::min(chunk, v.size() - off)), type, 0, c);
}
void bcast(MPI_Comm c, std::vector<double>& v) { bcast_numbers(c, v, MPI_DOUBLE); }
void bcast(MPI_Comm c, std::vector<std::uint64_t>& v) { bcast_numbers(c, v, MPI_UINT64_T); }
void bcast(MPI_Comm c, std::int64_t& x) { MPI_Bcast(&x, 1, MPI_INT64_T, 0, c); }
void bcast(MPI_Comm c, int& x) { MPI_Bcast(&x, 1, MPI_INT, 0, c); }

// Error kinds agreed between ranks (those of the target checks,
// atomic_file.hpp).
using atomic_file::kExists;
using atomic_file::kOk;
using atomic_file::kOther;

[[noreturn]] void raise(int kind, const std::string& msg) {
  if (kind == kExists) throw OutputExistsError(msg);
  throw ResultFileError(msg);
}

// Every rank passes its own (kind, message); if any rank has an error, every
// rank throws the error of the lowest such rank.
void agree(MPI_Comm c, int kind, const std::string& msg) {
  const int rank = comm_rank(c), size = comm_size(c);
  int mine = kind != kOk ? rank : size, first = size;
  MPI_Allreduce(&mine, &first, 1, MPI_INT, MPI_MIN, c);
  if (first == size) return;
  int k = kind;
  std::string m = msg;
  MPI_Bcast(&k, 1, MPI_INT, first, c);
  long long n = static_cast<long long>(m.size());
  MPI_Bcast(&n, 1, MPI_LONG_LONG, first, c);
  m.resize(static_cast<std::size_t>(n));
  if (n > 0) MPI_Bcast(m.data(), static_cast<int>(n), MPI_CHAR, first, c);
  raise(k, m);
}

// Broadcasts rank 0's stats; returns whether /stats is to be written.
bool bcast_stats(MPI_Comm comm, const EnsembleStats* in, EnsembleStats& st) {
  int have = (comm_rank(comm) == 0 && in && in->groups() > 0) ? 1 : 0;
  MPI_Bcast(&have, 1, MPI_INT, 0, comm);
  if (!have) return false;
  if (comm_rank(comm) == 0) st = *in;
  bcast(comm, st.param_names);
  bcast(comm, st.params);
  bcast(comm, st.count);
  long long nc = static_cast<long long>(st.columns.size());
  MPI_Bcast(&nc, 1, MPI_LONG_LONG, 0, comm);
  st.columns.resize(static_cast<std::size_t>(nc));
  for (auto& c : st.columns) {
    bcast(comm, c.name);
    bcast(comm, c.inner);
    bcast(comm, c.mean);
    bcast(comm, c.std);
    bcast(comm, c.sem);
    bcast(comm, c.median);
    bcast(comm, c.units);
    bcast(comm, c.meaning);
    bcast(comm, c.inner_dims);
  }
  return true;
}

// ---------------------------------------------------------------- writing

struct Ctx {
  const h5::Object* parent = nullptr;
  std::vector<std::int64_t> rows;  // this rank's global rows, ascending
  std::int64_t total = 0;
  std::vector<std::string>* made = nullptr;  // per-point datasets created, for the dimension scales
};

std::string join(const std::string& parent, const std::string& name) {
  return parent == "/" || parent.empty() ? "/" + name : parent + "/" + name;
}

void describe(const h5::Object& o, const std::string& units, const std::string& meaning) {
  h5::set_attr(o, "units", units);
  h5::set_attr(o, "meaning", meaning);
}

// Per-point dataset of shape (total, inner...) from this rank's rows.
template <class T>
void put(const Ctx& c, const std::string& name, hid_t file_type, hid_t mem_type,
         const std::vector<hsize_t>& inner, const std::vector<T>& buf, const std::string& units,
         const std::string& meaning) {
  std::vector<hsize_t> d{static_cast<hsize_t>(c.total)};
  d.insert(d.end(), inner.begin(), inner.end());
  h5::Dataset ds = h5::create_dataset(*c.parent, name, file_type, d,
                                      std::is_floating_point_v<T>);
  describe(ds, units, meaning);
  h5::write_rows(ds, c.rows, buf.data(), mem_type);
  ds.close();
  if (c.made) c.made->push_back(join(c.parent->path(), name));
}

template <class F>
std::vector<double> column(const std::vector<const PointRecord*>& recs, F f) {
  std::vector<double> v;
  v.reserve(recs.size());
  for (const auto* r : recs) v.push_back(f(*r));
  return v;
}

template <class F>
std::vector<std::int64_t> icolumn(const std::vector<const PointRecord*>& recs, F f) {
  std::vector<std::int64_t> v;
  v.reserve(recs.size());
  for (const auto* r : recs) v.push_back(f(*r));
  return v;
}

// Rows of width w: a record's vector copied, NaN padded; empty -> NaN row.
template <class F>
std::vector<double> rows_of(const std::vector<const PointRecord*>& recs, std::size_t w, F f) {
  std::vector<double> v(recs.size() * w, kNaN);
  for (std::size_t i = 0; i < recs.size(); ++i) {
    const std::vector<double>& x = f(*recs[i]);
    std::copy_n(x.begin(), std::min(x.size(), w), v.begin() + static_cast<std::ptrdiff_t>(i * w));
  }
  return v;
}

void put_f64(const Ctx& c, const std::string& name, const std::vector<hsize_t>& inner,
             const std::vector<double>& buf, const std::string& units, const std::string& meaning) {
  put(c, name, H5T_IEEE_F64LE, H5T_NATIVE_DOUBLE, inner, buf, units, meaning);
}
void put_i64(const Ctx& c, const std::string& name, const std::vector<std::int64_t>& buf,
             const std::string& units, const std::string& meaning) {
  put(c, name, H5T_STD_I64LE, H5T_NATIVE_INT64, {}, buf, units, meaning);
}

// Coordinate dataset written whole by rank 0.
void put_coord(const h5::Object& parent, bool writer, const std::string& name,
               const std::vector<std::int64_t>& v, const std::string& units,
               const std::string& meaning) {
  h5::Dataset ds = h5::create_dataset(parent, name, H5T_STD_I64LE, {v.size()});
  describe(ds, units, meaning);
  h5::write_all(ds, writer, v.data(), H5T_NATIVE_INT64);
  ds.close();
}

// Whole-dataset f64 array of shape dims, written by rank 0.
void put_whole_f64(const h5::Object& parent, bool writer, const std::string& name,
                   const std::vector<hsize_t>& dims, const std::vector<double>& v,
                   const std::string& units, const std::string& meaning) {
  h5::Dataset ds = h5::create_dataset(parent, name, H5T_IEEE_F64LE, dims, true);
  describe(ds, units, meaning);
  h5::write_all(ds, writer, v.data(), H5T_NATIVE_DOUBLE);
  ds.close();
}

// Rows of width w of int64 vectors, -1 padded; empty -> a row of -1.
template <class F>
std::vector<std::int64_t> irows_of(const std::vector<const PointRecord*>& recs, std::size_t w, F f) {
  std::vector<std::int64_t> v(recs.size() * w, -1);
  for (std::size_t i = 0; i < recs.size(); ++i) {
    const std::vector<std::int64_t>& x = f(*recs[i]);
    std::copy_n(x.begin(), std::min(x.size(), w), v.begin() + static_cast<std::ptrdiff_t>(i * w));
  }
  return v;
}

void put_i64_rows(const Ctx& c, const std::string& name, const std::vector<hsize_t>& inner,
                  const std::vector<std::int64_t>& buf, const std::string& units,
                  const std::string& meaning) {
  put(c, name, H5T_STD_I64LE, H5T_NATIVE_INT64, inner, buf, units, meaning);
}

void set_attrs(const h5::Object& o, const std::vector<AttrDecl>& attrs) {
  for (const auto& a : attrs) {
    if (a.kind == AttrDecl::Kind::Text) h5::set_attr(o, a.name, a.text);
    else if (a.kind == AttrDecl::Kind::Int) h5::set_attr(o, a.name, a.i);
    else h5::set_attr(o, a.name, a.d);
  }
}

std::string parent_path(const std::string& p) {
  const auto k = p.rfind('/');
  return k == 0 ? std::string("/") : p.substr(0, k);
}
std::string base_name(const std::string& p) { return p.substr(p.rfind('/') + 1); }

// Opens `path` (a group or "/") for the duration of one call.
h5::Group group_at(const h5::File& f, const std::string& path) {
  h5::Group g = h5::root(f);
  if (path == "/") return g;
  std::size_t i = 1;
  while (i <= path.size()) {
    std::size_t j = path.find('/', i);
    if (j == std::string::npos) j = path.size();
    g = h5::open_group(g, path.substr(i, j - i));
    i = j + 1;
  }
  return g;
}

// Attaches the scales `dims` (absolute paths) to the dimensions of the
// dataset at `path`, in order; a dataset of another rank is an internal error.
void attach_dims(const h5::File& f, const std::string& path, const std::vector<std::string>& dims) {
  h5::Group g = group_at(f, parent_path(path));
  h5::Dataset d = h5::open_dataset(g, base_name(path));
  if (h5::dims(d).size() != dims.size())
    throw ResultFileError("write_results: internal: " + path + " has " + std::to_string(h5::dims(d).size()) +
                          " dimensions for " + std::to_string(dims.size()) + " scales");
  for (unsigned k = 0; k < dims.size(); ++k) {
    if (dims[k] == path) continue;  // a scale is its own dimension
    h5::Group sg = group_at(f, parent_path(dims[k]));
    h5::Dataset s = h5::open_dataset(sg, base_name(dims[k]));
    h5::attach_scale(d, s, k);
  }
}

// The diagnostics' groups, coordinates and per-point fields, as declared in
// the run's schema (io/schema.hpp): the one writer for every diagnostic.
void write_diagnostics(const h5::File& f, Ctx c, bool writer, const Schema& s,
                       const std::vector<const PointRecord*>& recs) {
  for (const auto& gd : s.groups) {
    h5::Group parent = group_at(f, parent_path(gd.path));
    h5::Group g = h5::create_group(parent, base_name(gd.path));
    h5::set_attr(g, "meaning", gd.meaning);
    set_attrs(g, gd.attrs);
  }
  for (const auto& cd : s.coords) {
    h5::Group parent = group_at(f, parent_path(cd.path));
    std::vector<hsize_t> shape;
    for (const auto& d : cd.dims) shape.push_back(d == cd.path ? cd.size() : s.axis(d)->size());
    const bool fl = cd.type == Elem::F64;
    h5::Dataset ds = h5::create_dataset(parent, base_name(cd.path), fl ? H5T_IEEE_F64LE : H5T_STD_I64LE, shape, fl);
    describe(ds, cd.units, cd.meaning);
    set_attrs(ds, cd.attrs);
    if (fl) h5::write_all(ds, writer, cd.f.data(), H5T_NATIVE_DOUBLE);
    else h5::write_all(ds, writer, cd.i.data(), H5T_NATIVE_INT64);
    if (cd.is_axis()) h5::make_scale(ds, base_name(cd.path));
  }
  for (const auto& cd : s.coords)
    if (!cd.is_axis()) attach_dims(f, cd.path, cd.dims);
  for (std::size_t k = 0; k < s.fields.size(); ++k) {
    const FieldDecl& fd = s.fields[k];
    const std::vector<std::int64_t> inner = s.inner_shape(k);
    std::size_t n = 1;
    for (auto x : inner) n *= static_cast<std::size_t>(x);
    std::vector<hsize_t> hin(inner.begin(), inner.end());
    std::vector<double> bf, rf;
    std::vector<std::int64_t> bi, ri;
    const bool fl = fd.type == Elem::F64;
    if (fl) bf.reserve(recs.size() * n);
    else bi.reserve(recs.size() * n);
    static const FieldValue none;
    for (const auto* r : recs) {
      pad_value(s, k, k < r->fields.size() ? r->fields[k] : none, rf, ri);
      if (fl) bf.insert(bf.end(), rf.begin(), rf.end());
      else bi.insert(bi.end(), ri.begin(), ri.end());
    }
    h5::Group parent = group_at(f, parent_path(fd.path));
    Ctx cf = c;
    cf.parent = &parent;
    cf.made = nullptr;
    if (fl) put_f64(cf, base_name(fd.path), hin, bf, fd.units, fd.meaning);
    else put_i64_rows(cf, base_name(fd.path), hin, bi, fd.units, fd.meaning);
    if (!fd.attrs.empty()) {
      h5::Dataset ds = h5::open_dataset(parent, base_name(fd.path));
      set_attrs(ds, fd.attrs);
    }
    std::vector<std::string> dims{"/point"};
    dims.insert(dims.end(), fd.dims.begin(), fd.dims.end());
    attach_dims(f, fd.path, dims);
  }
}

// The dimensions of the per-point datasets outside the diagnostics, after
// the point axis (docs/layout.md).
std::vector<std::string> core_dims(const std::string& p) {
  if (p == "/chaos/exponents" || p == "/chaos/exponent_error") return {"/chaos/exponent"};
  for (const std::string g : {"/chaos", "/limit"}) {
    if (p == g + "/histogram/counts") return {g + "/histogram/bin"};
    if (p == g + "/histogram/edges") return {g + "/histogram/edge"};
  }
  if (p == "/bounds/cuts" || p == "/bounds/lyapunov_rate") return {"/bounds/region_size"};
  if (p == "/bounds/ehrenfest_time") return {"/bounds/local_dim"};
  if (p.rfind("/bounds/", 0) == 0) return {"/bounds/region_size", "/bounds/local_dim"};
  return {};
}

// An index axis 0..n-1 (a dimension scale) at group/name.
void put_index_axis(const h5::File& f, bool writer, const std::string& group, const std::string& name,
                    std::size_t n, const std::string& meaning) {
  h5::Group g = group_at(f, group);
  std::vector<std::int64_t> v(n);
  std::iota(v.begin(), v.end(), std::int64_t{0});
  h5::Dataset ds = h5::create_dataset(g, name, H5T_STD_I64LE, {n});
  describe(ds, "1", meaning);
  h5::write_all(ds, writer, v.data(), H5T_NATIVE_INT64);
  h5::make_scale(ds, name);
}

// The values of an axis of the run (a core axis or a declared one).
std::vector<std::int64_t> axis_values(const RunAxes& ax, const std::string& path, std::vector<double>& fvals,
                                      bool& is_float) {
  is_float = false;
  if (path == "/bounds/region_size") return ax.region_sizes;
  if (path == "/bounds/local_dim") return ax.local_dims;
  const CoordDecl* c = ax.schema.axis(path);
  if (!c) throw ResultFileError("write_results: internal: /stats names an unknown axis " + path);
  is_float = c->type == Elem::F64;
  fvals = c->f;
  return c->i;
}

void write_stats(const h5::File& f, const h5::Group& root, bool writer, const EnsembleStats& st, const RunAxes& ax) {
  const hsize_t G = static_cast<hsize_t>(st.count.size());
  const std::size_t np = st.param_names.size();
  h5::Group g = h5::create_group(root, "stats");
  h5::set_attr(g, "meaning",
               "ensemble statistics over groups of ok points that differ only in their seed; row "
               "g is one group, identified by the parameter datasets; mean, std, sem and median "
               "are taken over the count ok points of the group; std is the sample standard "
               "deviation (ddof = 1), sem = std / sqrt(count); std and sem are NaN where count < "
               "2, mean and median NaN where count = 0");
  h5::set_attr(g, "parameters", st.param_names);
  std::vector<std::string> cols;
  for (const auto& c : st.columns) cols.push_back(c.name);
  h5::set_attr(g, "columns", cols);
  put_index_axis(f, writer, "/stats", "group", G, "index of a group of points that differ only in their seed");
  std::vector<std::string> attach;  // datasets whose only dimension is the group axis
  for (std::size_t p = 0; p < np; ++p) {
    std::vector<std::int64_t> v(G);
    for (std::size_t i = 0; i < G; ++i) v[i] = st.params[i * np + p];
    put_coord(g, writer, st.param_names[p], v, "1",
              "value of /points/" + st.param_names[p] + " shared by the points of the group");
    attach.push_back("/stats/" + st.param_names[p]);
  }
  put_coord(g, writer, "count", st.count, "1",
            "number of ok points of the group that the statistics are taken over");
  attach.push_back("/stats/count");
  for (const auto& a : attach) attach_dims(f, a, {"/stats/group"});
  // Copies of the columns' inner axes under /stats (netCDF looks for a
  // dimension in the group and its ancestors): named after the source axis,
  // or <its group>_<name> where two sources share a name.
  std::map<std::string, std::string> copy_of;  // source axis -> /stats path
  std::set<std::string> taken{"group", "count"};
  for (const auto& n : st.param_names) taken.insert(n);
  for (const auto& n : cols) taken.insert(n);
  for (const auto& c : st.columns)
    for (const auto& d : c.inner_dims) {
      if (copy_of.count(d)) continue;
      std::string name = base_name(d);
      if (taken.count(name)) name = base_name(parent_path(d)) + "_" + name;
      while (taken.count(name)) name += "_";
      taken.insert(name);
      copy_of[d] = "/stats/" + name;
      bool fl = false;
      std::vector<double> fv;
      const std::vector<std::int64_t> iv = axis_values(ax, d, fv, fl);
      const hsize_t n = fl ? fv.size() : iv.size();
      h5::Dataset ds = h5::create_dataset(g, name, fl ? H5T_IEEE_F64LE : H5T_STD_I64LE, {n}, fl);
      describe(ds, "", "copy of the axis " + d + " (a trailing axis of the statistics of a column)");
      h5::set_attr(ds, "source", d);
      if (fl) h5::write_all(ds, writer, fv.data(), H5T_NATIVE_DOUBLE);
      else h5::write_all(ds, writer, iv.data(), H5T_NATIVE_INT64);
      h5::make_scale(ds, name);
    }
  for (const auto& c : st.columns) {
    h5::Group cg = h5::create_group(g, c.name);
    describe(cg, c.units, c.meaning);
    if (!c.inner_dims.empty()) h5::set_attr(cg, "axes", c.inner_dims);
    std::vector<hsize_t> dims{G};
    for (auto x : c.inner) dims.push_back(static_cast<hsize_t>(x));
    put_whole_f64(cg, writer, "mean", dims, c.mean, c.units,
                  "sample mean over the ok points of the group");
    put_whole_f64(cg, writer, "std", dims, c.std, c.units,
                  "sample standard deviation (ddof = 1) over the ok points of the group; NaN "
                  "where count < 2");
    put_whole_f64(cg, writer, "sem", dims, c.sem, c.units,
                  "standard error of the mean, std / sqrt(count); NaN where count < 2");
    put_whole_f64(cg, writer, "median", dims, c.median, c.units,
                  "median over the ok points of the group (mean of the two middle values for "
                  "even count)");
    cg.close();
    if (c.inner_dims.size() == c.inner.size()) {
      std::vector<std::string> sd{"/stats/group"};
      for (const auto& d : c.inner_dims) sd.push_back(copy_of.at(d));
      for (const char* n : {"mean", "std", "sem", "median"}) attach_dims(f, "/stats/" + c.name + "/" + n, sd);
    }
  }
  g.close();
}

void write_file(MPI_Comm comm, const std::string& file, const RunAxes& ax, const RunMeta& meta,
                std::int64_t total, const std::vector<const PointRecord*>& recs, std::size_t K,
                const EnsembleStats* stats) {
  const int rank = comm_rank(comm);
  const std::size_t nl = ax.region_sizes.size(), nn = ax.local_dims.size();
  const std::size_t bins = static_cast<std::size_t>(std::max(ax.hist_bins, 0));
  const std::size_t edges = bins > 0 ? bins + 1 : 0;
  const hsize_t hl = nl, hn = nn, hk = K, hb = bins, he = edges;

  h5::File f = h5::create_file_parallel(file, comm);
  {
    h5::Group root = h5::root(f);
    h5::set_attr(root, "toral_version",
                 meta.toral_version.empty() ? std::string(TORAL_VERSION) : meta.toral_version);
    h5::set_attr(root, "layout_version", kLayoutVersion);
    h5::set_attr(root, "config", meta.config_text);
    h5::set_attr(root, "config_source", meta.config_source);
    h5::set_attr(root, "created", meta.created);
    h5::set_attr(root, "ranks", meta.ranks);
    h5::set_attr(root, "point_count", total);
    h5::set_attr(root, "sweep_names", meta.sweep_names);
    h5::set_attr(root, "config_hash", meta.config_hash);
    h5::set_attr(root, "total_points", meta.total_points);
    h5::set_attr(root, "shard", meta.shard);
    h5::set_attr(root, "schema", ax.schema.text());
    h5::set_attr(root, "schema_hash", ax.schema.hash());

    Ctx c;
    c.total = total;
    for (const auto* r : recs) c.rows.push_back(row_of(*r));
    std::vector<std::string> made;
    c.made = &made;

    // ---- /point: the point axis of every per-point dataset (a dimension
    // scale at the root, visible from every group): the global index of
    // each row.
    {
      c.parent = &root;
      put_i64(c, "point", icolumn(recs, [](const PointRecord& r) { return r.index; }), "1",
              "the point axis: global index of the point of each row (as /points/index)");
      made.pop_back();
      h5::Dataset ds = h5::open_dataset(root, "point");
      h5::make_scale(ds, "point");
    }

    // ---- /points
    {
      h5::Group g = h5::create_group(root, "points");
      c.parent = &g;
      h5::set_attr(g, "meaning",
                   "one entry per sweep point held by this file; row i holds point index[i] "
                   "(= i in a whole-run file) in expansion order");
      h5::set_attr(g, "parameters", ax.param_names);
      h5::set_attr(g, "swept", ax.swept);
      h5::set_attr(g, "absent", std::numeric_limits<std::int64_t>::min());
      for (std::size_t p = 0; p < ax.param_names.size(); ++p) {
        std::vector<std::int64_t> v;
        v.reserve(recs.size());
        for (const auto* r : recs) v.push_back(r->params[p]);
        put_i64(c, ax.param_names[p], v, "1",
                p < ax.param_meanings.size() ? ax.param_meanings[p] : std::string());
      }
      put_i64(c, "index", icolumn(recs, [](const PointRecord& r) { return r.index; }), "1",
              "global index of the point of this row in the whole run (0 .. total_points-1, "
              "expansion order); equals the row in a whole-run file");
      {
        std::vector<std::int32_t> st, me;
        for (const auto* r : recs) {
          st.push_back(r->status);
          me.push_back(r->method);
        }
        put(c, "status", H5T_STD_I32LE, H5T_NATIVE_INT32, {}, st, "",
            "point status: 0 ok, 6 pending (not computed yet), else an error code (attribute "
            "labels); failed and pending points hold NaN results");
        h5::Dataset ds = h5::open_dataset(g, "status");
        h5::set_attr(ds, "labels", status_labels());
        ds.close();
        put(c, "method", H5T_STD_I32LE, H5T_NATIVE_INT32, {}, me, "",
            "spectrum method used (attribute labels: 0 none, 1 bloch, 2 dense, 3 krylov, 4 tangent)");
        ds = h5::open_dataset(g, "method");
        h5::set_attr(ds, "labels", method_labels());
        ds.close();
      }
      {
        std::vector<std::string> texts;
        texts.reserve(recs.size());
        for (const auto* r : recs) texts.push_back(r->message);
        const std::vector<char> msg = h5::pack_fixed_strings(texts, kMessageBytes);
        h5::Datatype t = h5::fixed_string_type(kMessageBytes);
        h5::Dataset ds = h5::create_dataset(g, "message", t.id(), {static_cast<hsize_t>(total)});
        describe(ds, "", "error message of a failed point (UTF-8, at most 255 bytes), empty when ok");
        h5::write_rows(ds, c.rows, msg.data(), t.id());
        ds.close();
        made.push_back("/points/message");
      }
      put_f64(c, "wall_time", {}, column(recs, [](const PointRecord& r) { return r.wall_time; }),
              "s", "wall-clock time spent computing the point");
      g.close();
    }

    // ---- /chaos
    {
      h5::Group g = h5::create_group(root, "chaos");
      c.parent = &g;
      h5::set_attr(g, "meaning", "Lyapunov spectrum of one period S of the finite lattice");
      put_f64(c, "lambda_max", {}, column(recs, [](const PointRecord& r) { return r.lambda_max; }),
              "1/period", "largest Lyapunov exponent ln|mu| of S");
      put_f64(c, "ks_rate", {}, column(recs, [](const PointRecord& r) { return r.ks_rate; }),
              "nats/period", "Kolmogorov-Sinai entropy rate: sum of the positive exponents");
      put_f64(c, "ks_density", {}, column(recs, [](const PointRecord& r) { return r.ks_density; }),
              "nats/(period*site)", "KS entropy rate per site: ks_rate / L");
      put_i64(c, "unstable_count",
              icolumn(recs, [](const PointRecord& r) { return r.unstable_count; }), "1",
              "number of positive exponents: exactly (2L - zero_count) / 2 when zero_certified = 1, "
              "else those above their error estimate; -1 when not computed");
      put_i64(c, "zero_count", icolumn(recs, [](const PointRecord& r) { return r.zero_count; }), "1",
              "number of exponents that are exactly zero (zero_certified = 1: stored as 0.0) or within "
              "their error estimate of zero (zero_certified = 0); -1 when not computed");
      put_i64(c, "zero_certified",
              icolumn(recs, [](const PointRecord& r) { return r.zero_certified; }), "1",
              "1: zero exponents decided exactly from the integer characteristic polynomial; 0: by the "
              "numerical error estimate (not certified); -1: not computed (krylov, tangent)");
      put_f64(c, "exponents", {hk},
              rows_of(recs, K, [](const PointRecord& r) -> const auto& { return r.exponents; }),
              "1/period",
              "kept Lyapunov exponents, descending; NaN padded beyond exponent_count");
      put_i64(c, "exponent_count",
              icolumn(recs,
                      [](const PointRecord& r) { return static_cast<std::int64_t>(r.exponents.size()); }),
              "1", "number of real (non-padding) entries in the row of exponents");
      put_f64(c, "exponent_error", {hk},
              rows_of(recs, K,
                      [](const PointRecord& r) -> const auto& { return r.exponent_errors; }),
              "1/period",
              "estimated absolute error of each entry of the row of exponents; NaN where not "
              "estimated and as padding beyond exponent_count");
      {
        h5::Group sg = h5::create_group(g, "solver");
        Ctx cs = c;
        cs.parent = &sg;
        h5::set_attr(sg, "meaning", "diagnostics of the solver that produced the spectrum");
        {
          std::vector<std::int32_t> v;
          v.reserve(recs.size());
          for (const auto* r : recs) v.push_back(r->solver);
          put(cs, "method", H5T_STD_I32LE, H5T_NATIVE_INT32, {}, v, "",
              "spectrum solver (attribute labels: 0 none, 1 lapack, 2 bloch_exact, 3 "
              "krylov_schur, 4 shift_invert, 5 tangent)");
          h5::Dataset ds = h5::open_dataset(sg, "method");
          h5::set_attr(ds, "labels", solver_labels());
          ds.close();
        }
        put_i64(cs, "converged", icolumn(recs, [](const PointRecord& r) { return r.solver_converged; }),
                "1", "eigenpairs converged (iterative solvers) or exponents estimated; -1 not "
                     "reported");
        put_i64(cs, "iterations",
                icolumn(recs, [](const PointRecord& r) { return r.solver_iterations; }), "1",
                "restarts, iterations or periods the solver used; -1 not reported");
        put_f64(cs, "residual", {},
                column(recs, [](const PointRecord& r) { return r.solver_residual; }), "1",
                "largest relative residual ||S x - mu x|| / |mu| of the returned eigenpairs; NaN "
                "not reported");
        put_f64(cs, "wall_time", {},
                column(recs, [](const PointRecord& r) { return r.solver_time; }), "s",
                "wall-clock time spent in the solver");
        put_i64(cs, "ranks", icolumn(recs, [](const PointRecord& r) { return r.solver_ranks; }),
                "1", "MPI ranks that computed the point together");
        put_i64(cs, "cluster_count",
                icolumn(recs, [](const PointRecord& r) { return r.cluster_count; }), "1",
                "computed eigenvalues within the cluster tolerance of the top one; -1 not "
                "reported");
        put_f64(cs, "cluster_spread", {},
                column(recs, [](const PointRecord& r) { return r.cluster_spread; }), "1/period",
                "spread in exponent (ln|mu|) of that cluster; NaN not reported");
        sg.close();
      }
      {
        h5::Group a = h5::create_group(g, "accuracy");
        Ctx ca = c;
        ca.parent = &a;
        h5::set_attr(a, "meaning", "accuracy estimates of the spectrum");
        put_f64(ca, "pairing_defect", {},
                column(recs, [](const PointRecord& r) { return r.pairing_defect; }), "1/period",
                "max_i |lambda_i + lambda_{2L+1-i}| (symplectic pairing defect)");
        put_f64(ca, "sum_defect", {},
                column(recs, [](const PointRecord& r) { return r.sum_defect; }), "1/period",
                "|sum_i lambda_i| of what was diagonalised (det S = 1 defect)");
        put_f64(ca, "error_bound", {},
                column(recs, [](const PointRecord& r) { return r.error_bound; }), "1/period",
                "estimated absolute error of one exponent");
        a.close();
      }
      {
        h5::Group h = h5::create_group(g, "histogram");
        Ctx ch = c;
        ch.parent = &h;
        h5::set_attr(h, "meaning", "histogram of all 2L exponents of the point");
        put_f64(ch, "counts", {hb},
                rows_of(recs, bins, [](const PointRecord& r) -> const auto& { return r.hist_counts; }),
                "1", "fraction of the 2L exponents in each bin; NaN row when none");
        put_f64(ch, "edges", {he},
                rows_of(recs, edges, [](const PointRecord& r) -> const auto& { return r.hist_edges; }),
                "1/period", "bin edges (bins + 1, ascending); NaN row when none");
        h.close();
      }
      g.close();
    }

    // ---- /limit
    if (ax.bulk_limit) {
      h5::Group g = h5::create_group(root, "limit");
      c.parent = &g;
      h5::set_attr(g, "meaning",
                   "bulk limit L -> infinity, per site; NaN for points that are not "
                   "translation-invariant");
      put_f64(c, "lambda_max", {},
              column(recs, [](const PointRecord& r) { return r.limit_lambda_max; }), "1/period",
              "sup over momenta k of the largest exponent");
      put_f64(c, "ks_density", {},
              column(recs, [](const PointRecord& r) { return r.limit_ks_density; }),
              "nats/(period*site)", "KS entropy rate per site in the bulk limit");
      put_f64(c, "accuracy", {},
              column(recs, [](const PointRecord& r) { return r.limit_accuracy; }), "1/period",
              "estimated absolute error of lambda_max and ks_density");
      {
        h5::Group h = h5::create_group(g, "histogram");
        Ctx ch = c;
        ch.parent = &h;
        h5::set_attr(h, "meaning", "exponent density of the bulk limit");
        put_f64(ch, "counts", {hb},
                rows_of(recs, bins,
                        [](const PointRecord& r) -> const auto& { return r.limit_hist_counts; }),
                "1", "fraction of the exponents in each bin; NaN row when none");
        put_f64(ch, "edges", {he},
                rows_of(recs, edges,
                        [](const PointRecord& r) -> const auto& { return r.limit_hist_edges; }),
                "1/period", "bin edges (bins + 1, ascending); NaN row when none");
        h.close();
      }
      g.close();
    }

    // ---- /bounds
    {
      h5::Group g = h5::create_group(root, "bounds");
      c.parent = &g;
      h5::set_attr(g, "meaning",
                   "entanglement growth of ell-site blocks per point over region sizes ell (region_size) "
                   "and local dimensions N (local_dim): two theorems (hilbert_cap, lightcone_rate) and "
                   "the asymptotic rate of a generic region (lyapunov_rate, not a bound; docs/bounds.md)");
      put_coord(g, rank == 0, "region_size", ax.region_sizes, "sites",
                "region size ell: axis 1 of cuts, lyapunov_rate, hilbert_cap, lightcone_rate and saturation_*");
      put_coord(g, rank == 0, "local_dim", ax.local_dims, "1",
                "local Hilbert-space dimension N: last axis of hilbert_cap, lightcone_rate, "
                "ehrenfest_time and saturation_*");
      for (const char* n : {"region_size", "local_dim"}) {
        h5::Dataset ds = h5::open_dataset(g, n);
        h5::make_scale(ds, n);
      }
      put_i64_rows(c, "cuts", {hl},
                   irows_of(recs, nl, [](const PointRecord& r) -> const auto& { return r.cuts; }), "1",
                   "boundary cuts c of the ell-site block (bonds with one end inside it), each crossed by "
                   "one gate per period: 2 inside a ring or (placement bulk) strictly inside an open chain, "
                   "1 at an end of an open chain, 0 for ell = L; -1 where no such block exists or not "
                   "computed, [ell]");
      put_f64(c, "lyapunov_rate", {hl},
              rows_of(recs, nl, [](const PointRecord& r) -> const auto& { return r.lyapunov_rate; }),
              "nats/period",
              "Lambda_ell, the asymptotic entropy growth rate of a generic ell-site region (Bianchi, "
              "Hackl & Yokomizo 2018): sum of the 2 min(ell, L-ell) largest exponents; not a bound, and a "
              "particular region may reach less (/entanglement/region_rate); NaN where not applicable");
      put_f64(c, "hilbert_cap", {hl, hn},
              rows_of(recs, nl * nn, [](const PointRecord& r) -> const auto& { return r.hilbert_cap; }),
              "nats", "maximal entropy of an ell-site region of N-level sites, min(ell, L-ell) ln N "
                      "(theorem), [ell][N]");
      put_f64(c, "lightcone_rate", {hl, hn},
              rows_of(recs, nl * nn, [](const PointRecord& r) -> const auto& { return r.lightcone_rate; }),
              "nats/period", "light-cone bound 2 c ln N on the entropy growth per period of the ell-site "
                             "block with c = cuts[ell] (theorem), [ell][N]");
      put_f64(c, "ehrenfest_time", {hn},
              rows_of(recs, nn, [](const PointRecord& r) -> const auto& { return r.ehrenfest_time; }),
              "periods", "Ehrenfest time ln N / lambda_max (+inf for lambda_max = 0), [N]");
      put_f64(c, "saturation_lyapunov", {hl, hn},
              rows_of(recs, nl * nn,
                      [](const PointRecord& r) -> const auto& { return r.saturation_lyapunov; }),
              "periods", "hilbert_cap / lyapunov_rate: the time a generic region growing at its asymptotic "
                         "rate would need to reach the cap (not a bound; +inf for a zero rate), [ell][N]");
      put_f64(c, "saturation_lightcone", {hl, hn},
              rows_of(recs, nl * nn,
                      [](const PointRecord& r) -> const auto& { return r.saturation_lightcone; }),
              "periods", "hilbert_cap / lightcone_rate: no finite-N entropy of the block reaches the cap "
                         "earlier (theorem), [ell][N]");
      g.close();
    }

    // ---- index axes of the spectrum groups, and every dataset's dimensions
    put_index_axis(f, rank == 0, "/chaos", "exponent", K, "index of a kept exponent (descending order)");
    for (const std::string gp : {"/chaos", "/limit"}) {
      if (gp == "/limit" && !ax.bulk_limit) continue;
      put_index_axis(f, rank == 0, gp + "/histogram", "bin", bins, "index of a histogram bin");
      put_index_axis(f, rank == 0, gp + "/histogram", "edge", edges, "index of a histogram bin edge");
    }
    for (const std::string& p : made) {
      std::vector<std::string> dims{"/point"};
      for (const std::string& d : core_dims(p)) dims.push_back(d);
      attach_dims(f, p, dims);
    }

    // ---- the diagnostics (/entanglement, ...), as declared
    write_diagnostics(f, c, rank == 0, ax.schema, recs);

    // ---- /stats
    if (stats) write_stats(f, root, rank == 0, *stats, ax);
    root.close();
  }
  f.close();
}

}  // namespace

// ---------------------------------------------------------------- public

void check_output_target(MPI_Comm comm, const std::string& path, bool overwrite) {
  std::pair<int, std::string> p{kOk, {}};
  if (comm_rank(comm) == 0) p = atomic_file::target_problem(path, overwrite);
  bcast(comm, p.first);
  bcast(comm, p.second);
  if (p.first != kOk) raise(p.first, p.second);
}

void write_results(MPI_Comm comm, const std::string& path, bool overwrite, const RunAxes& axes,
                   const RunMeta& meta, std::int64_t rows, const std::vector<PointRecord>& local,
                   const EnsembleStats* stats) {
  const int rank = comm_rank(comm);
  std::string where = path;
  bcast(comm, where);  // the path must be the same everywhere; rank 0's wins
  check_output_target(comm, where, overwrite);

  // Rank 0's axes and meta, so that all ranks write identical metadata.
  RunAxes ax = axes;
  RunMeta mt = meta;
  bcast(comm, ax.param_names);
  bcast(comm, ax.param_meanings);
  bcast(comm, ax.swept);
  bcast(comm, ax.region_sizes);
  bcast(comm, ax.local_dims);
  bcast(comm, ax.hist_bins);
  int bulk = ax.bulk_limit ? 1 : 0;
  bcast(comm, bulk);
  ax.bulk_limit = bulk != 0;
  std::string schema_text;  // the diagnostics' schema travels as its canonical text
  if (rank == 0) schema_text = ax.schema.text();
  bcast(comm, schema_text);
  bcast(comm, mt.toral_version);
  bcast(comm, mt.config_text);
  bcast(comm, mt.config_source);
  if (rank == 0 && mt.created.empty()) mt.created = iso8601_utc_now();
  bcast(comm, mt.created);
  if (rank == 0 && mt.ranks < 1) mt.ranks = comm_size(comm);
  bcast(comm, mt.ranks);
  bcast(comm, mt.sweep_names);
  if (rank == 0 && mt.config_hash.empty()) mt.config_hash = config_hash_of(mt.config_text);
  bcast(comm, mt.config_hash);
  bcast(comm, mt.total_points);
  bcast(comm, mt.shard);
  EnsembleStats st;
  const bool with_stats = bcast_stats(comm, stats, st);

  {
    std::int64_t tot[2] = {rows, -rows}, red[2] = {0, 0};
    MPI_Allreduce(tot, red, 2, MPI_INT64_T, MPI_MIN, comm);
    if (red[0] != -red[1])
      raise(kOther, "write_results: rows differs between ranks (" + std::to_string(red[0]) +
                        " .. " + std::to_string(-red[1]) + ")");
    if (rows < 0) raise(kOther, "write_results: negative rows");
    if (ax.hist_bins < 0) raise(kOther, "write_results: negative hist_bins");
    {
      std::string e;
      try {
        ax.schema = Schema::parse(schema_text);
        e = ax.schema.validate();
      } catch (const std::exception& ex) {
        e = ex.what();
      }
      if (!e.empty()) raise(kOther, "write_results: diagnostics' schema: " + e);
    }
    if (mt.total_points < 0) raise(kOther, "write_results: negative meta.total_points");
    if (mt.total_points == 0) mt.total_points = rows;
    if (mt.total_points < rows)
      raise(kOther, "write_results: meta.total_points (" + std::to_string(mt.total_points) +
                        ") is smaller than the " + std::to_string(rows) + " rows");
    if (with_stats) {
      const std::string e = result_detail::validate_stats(st);
      if (!e.empty()) raise(kOther, "write_results: " + e);  // same data, same result everywhere
    }
  }
  const bool whole = mt.shard.empty() && mt.total_points == rows;

  std::vector<const PointRecord*> recs;
  recs.reserve(local.size());
  for (const auto& r : local) recs.push_back(&r);
  std::stable_sort(recs.begin(), recs.end(), [](const PointRecord* a, const PointRecord* b) {
    return row_of(*a) < row_of(*b);
  });
  {
    std::string e = result_detail::validate(recs, ax, rows, mt.total_points, whole);
    agree(comm, e.empty() ? kOk : kOther, e.empty() ? e : "write_results: " + e);
  }
  // Coverage: every row exactly once over all ranks. The local rows are
  // valid and unique, so count == rows and union == all suffice.
  {
    long long n = static_cast<long long>(recs.size()), sum = 0;
    MPI_Allreduce(&n, &sum, 1, MPI_LONG_LONG, MPI_SUM, comm);
    const std::size_t nbytes = static_cast<std::size_t>((rows + 7) / 8);
    std::vector<unsigned char> mine(nbytes, 0), all(nbytes, 0);
    for (const auto* r : recs) {
      const std::int64_t row = row_of(*r);
      mine[static_cast<std::size_t>(row / 8)] |= static_cast<unsigned char>(1u << (row % 8));
    }
    const std::size_t chunk = 1u << 30;
    for (std::size_t off = 0; off < nbytes; off += chunk)
      MPI_Allreduce(mine.data() + off, all.data() + off, static_cast<int>(std::min(chunk, nbytes - off)),
                    MPI_UNSIGNED_CHAR, MPI_BOR, comm);
    std::int64_t missing = -1;
    for (std::int64_t i = 0; i < rows && missing < 0; ++i)
      if (!(all[static_cast<std::size_t>(i / 8)] & (1u << (i % 8)))) missing = i;
    if (missing >= 0)
      raise(kOther, whole ? "write_results: no rank passed point " + std::to_string(missing) +
                                " of " + std::to_string(rows)
                          : "write_results: no rank passed a record for row " +
                                std::to_string(missing) + " of " + std::to_string(rows));
    if (sum != rows)
      raise(kOther, "write_results: " + std::to_string(sum) + " records for " +
                        std::to_string(rows) + " rows: some row was passed by more than one rank");
  }
  // Unique global indices (implied by unique rows in a whole-run file).
  if (!whole) {
    std::string e = result_detail::duplicate_index(comm, recs);
    agree(comm, e.empty() ? kOk : kOther, e.empty() ? e : "write_results: " + e);
  }

  unsigned long long kmine = 0, K = 0;
  for (const auto* r : recs) kmine = std::max<unsigned long long>(kmine, r->exponents.size());
  MPI_Allreduce(&kmine, &K, 1, MPI_UNSIGNED_LONG_LONG, MPI_MAX, comm);

  std::string tmp;
  if (rank == 0) tmp = atomic_file::temp_name(where);
  bcast(comm, tmp);

  std::string err;
  try {
    write_file(comm, tmp, ax, mt, rows, recs, static_cast<std::size_t>(K),
               with_stats ? &st : nullptr);
  } catch (const std::exception& e) {
    err = e.what();
  }
  {
    // Every rank reaches here once its handles are closed.
    int bad = err.empty() ? 0 : 1, any = 0;
    MPI_Allreduce(&bad, &any, 1, MPI_INT, MPI_MAX, comm);
    if (any) {
      if (rank == 0) std::remove(tmp.c_str());
      agree(comm, bad ? kOther : kOk, "writing '" + where + "' failed: " + err);
    }
  }
  std::pair<int, std::string> pub{kOk, {}};
  if (rank == 0) {
    pub = atomic_file::publish(tmp, where, overwrite);
    if (pub.first != kOk) std::remove(tmp.c_str());
  }
  bcast(comm, pub.first);
  bcast(comm, pub.second);
  if (pub.first != kOk) raise(pub.first, pub.second);
}

}  // namespace toral
