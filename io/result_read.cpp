// The result file reader: read_results and its Reader helper class (serial,
// plain sec2 file access; no MPI needed).
#include <unistd.h>

#include <algorithm>
#include <cerrno>
#include <cmath>
#include <cstring>
#include <filesystem>
#include <string>
#include <vector>

#include "h5.hpp"
#include "result_file.hpp"

namespace toral {

namespace fs = std::filesystem;

// ---------------------------------------------------------------- reading

namespace {

std::string one_line(std::string s) {
  for (char& ch : s)
    if (ch == '\n' || ch == '\r') ch = ' ';
  return s;
}

[[noreturn]] void bad_file(const std::string& path, const std::string& what) {
  throw ResultFileError("read_results: '" + path + "': " + one_line(what));
}

// The innermost description on the HDF5 error stack (then cleared).
std::string innermost_h5_error() {
  std::vector<std::string> msgs;
  H5Ewalk2(
      H5E_DEFAULT, H5E_WALK_DOWNWARD,
      [](unsigned, const H5E_error2_t* e, void* d) -> herr_t {
        if (e->desc && *e->desc) static_cast<std::vector<std::string>*>(d)->push_back(e->desc);
        return 0;
      },
      &msgs);
  H5Eclear2(H5E_DEFAULT);
  return msgs.empty() ? std::string("no HDF5 detail") : msgs.back();
}

std::string shape_text(const std::vector<hsize_t>& d) {
  std::string s = "(";
  for (std::size_t i = 0; i < d.size(); ++i) s += (i ? ", " : "") + std::to_string(d[i]);
  return s + (d.size() == 1 ? ",)" : ")");
}

class Reader {
 public:
  Reader(std::string path, h5::File f) : path_(std::move(path)), f_(std::move(f)) {}

  // Whether every component of `p` ("/a/b/c") exists.
  bool has(const std::string& p) const {
    if (p == "/") return true;
    std::string cur;
    std::size_t i = 1;
    while (i <= p.size()) {
      std::size_t j = p.find('/', i);
      if (j == std::string::npos) j = p.size();
      cur.push_back('/');
      cur.append(p, i, j - i);
      const htri_t r = H5Lexists(f_.id(), cur.c_str(), H5P_DEFAULT);
      if (r < 0) bad_file(path_, "corrupt: cannot look up " + cur + " (" + innermost_h5_error() + ")");
      if (r == 0) return false;
      i = j + 1;
    }
    return true;
  }

  // Opens object `p`, which must exist and be of type `want` (an id to be
  // closed with H5Oclose).
  hid_t open(const std::string& p, H5I_type_t want, const char* what) const {
    if (!has(p)) bad_file(path_, std::string("not a valid toral file: missing ") + what + " " + p);
    const hid_t id = H5Oopen(f_.id(), p.c_str(), H5P_DEFAULT);
    if (id < 0) bad_file(path_, "corrupt: cannot open " + p + " (" + innermost_h5_error() + ")");
    if (H5Iget_type(id) != want) {
      H5Oclose(id);
      bad_file(path_, "not a valid toral file: " + p + " is not a " + what);
    }
    return id;
  }
  h5::Dataset dataset(const std::string& p) const {
    return h5::Dataset(open(p, H5I_DATASET, "dataset"), H5Oclose, path_, p);
  }
  h5::Group group(const std::string& p) const {
    return h5::Group(open(p, H5I_GROUP, "group"), H5Oclose, path_, p);
  }

  // A dataset whose shape must be `want`.
  h5::Dataset shaped(const std::string& p, const std::vector<hsize_t>& want) const {
    h5::Dataset d = dataset(p);
    const auto got = h5::dims(d);
    if (got != want)
      bad_file(path_, "corrupt: " + p + " has shape " + shape_text(got) + ", expected " +
                          shape_text(want));
    return d;
  }
  std::vector<double> f64(const std::string& p, const std::vector<hsize_t>& want) const {
    return h5::read_doubles(shaped(p, want));
  }
  std::vector<std::int64_t> i64(const std::string& p, const std::vector<hsize_t>& want) const {
    return h5::read_int64s(shaped(p, want));
  }
  std::vector<std::int32_t> i32(const std::string& p, const std::vector<hsize_t>& want) const {
    return h5::read_int32s(shaped(p, want));
  }
  // The trailing dimensions of a dataset whose first one must be P and whose
  // rank must be `rank`.
  std::vector<hsize_t> inner(const std::string& p, hsize_t P, std::size_t rank) const {
    const auto d = h5::dims(dataset(p));
    if (d.size() != rank || d[0] != P)
      bad_file(path_, "corrupt: " + p + " has shape " + shape_text(d) + ", expected " +
                          std::to_string(rank) + " axes and " + std::to_string(P) + " rows");
    return {d.begin() + 1, d.end()};
  }

  // The length of a dataset that must be 1-D.
  hsize_t length(const std::string& p) const {
    const auto d = h5::dims(dataset(p));
    if (d.size() != 1)
      bad_file(path_, "corrupt: " + p + " has shape " + shape_text(d) + ", expected one axis");
    return d[0];
  }

  void need_attr(const h5::Object& o, const std::string& name) const {
    if (!h5::has_attr(o, name))
      bad_file(path_, "not a valid toral file: missing attribute '" + name + "' of " + o.path());
  }
  std::string str(const h5::Object& o, const std::string& name) const {
    need_attr(o, name);
    return h5::read_attr_string(o, name);
  }
  std::string str_or(const h5::Object& o, const std::string& name, std::string dflt) const {
    return h5::has_attr(o, name) ? h5::read_attr_string(o, name) : dflt;
  }
  std::vector<std::string> strs(const h5::Object& o, const std::string& name) const {
    need_attr(o, name);
    return h5::read_attr_strings(o, name);
  }
  std::int64_t int_attr(const h5::Object& o, const std::string& name) const {
    need_attr(o, name);
    return h5::read_attr_int(o, name);
  }

  const std::string& path() const { return path_; }
  const h5::File& file() const { return f_; }

 private:
  std::string path_;
  h5::File f_;
};

// Row i of width w of a flat array; empty when the row is all NaN (or w = 0).
std::vector<double> row_or_empty(const std::vector<double>& v, std::size_t i, std::size_t w) {
  const auto b = v.begin() + static_cast<std::ptrdiff_t>(i * w), e = b + static_cast<std::ptrdiff_t>(w);
  if (std::all_of(b, e, [](double x) { return std::isnan(x); })) return {};
  return {b, e};
}

ResultData read_file(const Reader& rd) {
  ResultData out;
  const std::string& path = rd.path();
  h5::Group root = rd.group("/");
  if (!h5::has_attr(root, "toral_version") || !h5::has_attr(root, "layout_version"))
    bad_file(path, "not a toral result file (no root attributes toral_version and layout_version)");
  const std::int64_t version = h5::read_attr_int(root, "layout_version");
  if (version != kLayoutVersion)
    bad_file(path, "unsupported layout version " + std::to_string(version) + " (this toral reads layout version " +
                       std::to_string(kLayoutVersion) +
                       (version < kLayoutVersion ? "; rerun the config with this toral to rewrite it, docs/layout.md "
                                                   "lists what changed"
                                                 : "; written by a newer toral") +
                       ")");

  RunMeta& mt = out.meta;
  mt.toral_version = rd.str(root, "toral_version");
  mt.config_text = rd.str(root, "config");
  mt.config_source = rd.str(root, "config_source");
  mt.created = rd.str(root, "created");
  mt.ranks = rd.int_attr(root, "ranks");
  mt.sweep_names = rd.strs(root, "sweep_names");
  const std::int64_t P = rd.int_attr(root, "point_count");
  if (P < 0) bad_file(path, "corrupt: negative point_count " + std::to_string(P));
  out.rows = P;
  mt.config_hash = rd.str_or(root, "config_hash", "");
  mt.total_points = h5::has_attr(root, "total_points") ? h5::read_attr_int(root, "total_points") : P;
  mt.shard = rd.str_or(root, "shard", "");
  if (mt.total_points < P)
    bad_file(path, "corrupt: total_points " + std::to_string(mt.total_points) + " < point_count " +
                       std::to_string(P));

  const hsize_t hP = static_cast<hsize_t>(P);
  const std::size_t n = static_cast<std::size_t>(P);
  RunAxes& ax = out.axes;
  std::vector<PointRecord>& recs = out.records;
  recs.resize(n);
  for (std::size_t i = 0; i < n; ++i) recs[i].row = recs[i].index = static_cast<std::int64_t>(i);

  auto each_f64 = [&](const std::vector<double>& v, double PointRecord::*m) {
    for (std::size_t i = 0; i < n; ++i) recs[i].*m = v[i];
  };
  auto each_i64 = [&](const std::vector<std::int64_t>& v, std::int64_t PointRecord::*m) {
    for (std::size_t i = 0; i < n; ++i) recs[i].*m = v[i];
  };
  auto each_row = [&](const std::vector<double>& v, std::size_t w,
                      std::vector<double> PointRecord::*m) {
    for (std::size_t i = 0; i < n; ++i) recs[i].*m = row_or_empty(v, i, w);
  };

  // ---- /points
  {
    h5::Group g = rd.group("/points");
    ax.param_names = rd.strs(g, "parameters");
    ax.swept = rd.strs(g, "swept");
    for (auto& r : recs) r.params.resize(ax.param_names.size());
    for (std::size_t p = 0; p < ax.param_names.size(); ++p) {
      const std::string dp = "/points/" + ax.param_names[p];
      h5::Dataset d = rd.shaped(dp, {hP});
      ax.param_meanings.push_back(rd.str_or(d, "meaning", ""));
      const auto v = h5::read_int64s(d);
      for (std::size_t i = 0; i < n; ++i) recs[i].params[p] = v[i];
    }
    if (rd.has("/points/index")) {
      const auto v = rd.i64("/points/index", {hP});
      std::vector<std::int64_t> sorted = v;
      std::sort(sorted.begin(), sorted.end());
      if (!sorted.empty() && (sorted.front() < 0 || sorted.back() >= mt.total_points))
        bad_file(path, "corrupt: /points/index outside 0.." + std::to_string(mt.total_points - 1));
      if (std::adjacent_find(sorted.begin(), sorted.end()) != sorted.end())
        bad_file(path, "corrupt: /points/index holds a point twice");
      each_i64(v, &PointRecord::index);
    }
    const auto st = rd.i32("/points/status", {hP});
    const auto me = rd.i32("/points/method", {hP});
    for (std::size_t i = 0; i < n; ++i) {
      recs[i].status = st[i];
      recs[i].method = me[i];
    }
    const auto msg = h5::read_fixed_strings(rd.shaped("/points/message", {hP}));
    for (std::size_t i = 0; i < n; ++i) recs[i].message = msg[i];
    each_f64(rd.f64("/points/wall_time", {hP}), &PointRecord::wall_time);
  }

  // ---- /chaos
  {
    rd.group("/chaos");
    each_f64(rd.f64("/chaos/lambda_max", {hP}), &PointRecord::lambda_max);
    each_f64(rd.f64("/chaos/ks_rate", {hP}), &PointRecord::ks_rate);
    each_f64(rd.f64("/chaos/ks_density", {hP}), &PointRecord::ks_density);
    each_i64(rd.i64("/chaos/unstable_count", {hP}), &PointRecord::unstable_count);
    if (rd.has("/chaos/zero_count")) {  // absent in files written before toral 0.2
      each_i64(rd.i64("/chaos/zero_count", {hP}), &PointRecord::zero_count);
      each_i64(rd.i64("/chaos/zero_certified", {hP}), &PointRecord::zero_certified);
    }
    const hsize_t K = rd.inner("/chaos/exponents", hP, 2)[0];
    const std::size_t k = static_cast<std::size_t>(K);
    const auto ex = rd.f64("/chaos/exponents", {hP, K});
    const auto cnt = rd.i64("/chaos/exponent_count", {hP});
    std::vector<double> er;
    if (rd.has("/chaos/exponent_error")) er = rd.f64("/chaos/exponent_error", {hP, K});
    for (std::size_t i = 0; i < n; ++i) {
      if (cnt[i] < 0 || static_cast<hsize_t>(cnt[i]) > K)
        bad_file(path, "corrupt: /chaos/exponent_count[" + std::to_string(i) + "] = " +
                           std::to_string(cnt[i]) + " outside 0.." + std::to_string(K));
      const auto b = static_cast<std::ptrdiff_t>(i * k), c = static_cast<std::ptrdiff_t>(cnt[i]);
      recs[i].exponents.assign(ex.begin() + b, ex.begin() + b + c);
      if (!er.empty()) {
        recs[i].exponent_errors.assign(er.begin() + b, er.begin() + b + c);
        if (std::all_of(recs[i].exponent_errors.begin(), recs[i].exponent_errors.end(),
                        [](double x) { return std::isnan(x); }))
          recs[i].exponent_errors.clear();
      }
    }
    each_f64(rd.f64("/chaos/accuracy/pairing_defect", {hP}), &PointRecord::pairing_defect);
    each_f64(rd.f64("/chaos/accuracy/sum_defect", {hP}), &PointRecord::sum_defect);
    each_f64(rd.f64("/chaos/accuracy/error_bound", {hP}), &PointRecord::error_bound);
    const hsize_t B = rd.inner("/chaos/histogram/counts", hP, 2)[0], E = B ? B + 1 : 0;
    ax.hist_bins = static_cast<int>(B);
    if (static_cast<hsize_t>(ax.hist_bins) != B)
      bad_file(path, "corrupt: /chaos/histogram/counts has " + std::to_string(B) + " bins");
    each_row(rd.f64("/chaos/histogram/counts", {hP, B}), static_cast<std::size_t>(B),
             &PointRecord::hist_counts);
    each_row(rd.f64("/chaos/histogram/edges", {hP, E}), static_cast<std::size_t>(E),
             &PointRecord::hist_edges);
    if (rd.has("/chaos/solver")) {
      if (rd.has("/chaos/solver/method")) {
        const auto v = rd.i32("/chaos/solver/method", {hP});
        for (std::size_t i = 0; i < n; ++i) recs[i].solver = v[i];
      }
      auto opt_i64 = [&](const char* name, std::int64_t PointRecord::*m) {
        const std::string dp = std::string("/chaos/solver/") + name;
        if (rd.has(dp)) each_i64(rd.i64(dp, {hP}), m);
      };
      auto opt_f64 = [&](const char* name, double PointRecord::*m) {
        const std::string dp = std::string("/chaos/solver/") + name;
        if (rd.has(dp)) each_f64(rd.f64(dp, {hP}), m);
      };
      opt_i64("converged", &PointRecord::solver_converged);
      opt_i64("iterations", &PointRecord::solver_iterations);
      opt_f64("residual", &PointRecord::solver_residual);
      opt_f64("wall_time", &PointRecord::solver_time);
      opt_i64("ranks", &PointRecord::solver_ranks);
      opt_i64("cluster_count", &PointRecord::cluster_count);
      opt_f64("cluster_spread", &PointRecord::cluster_spread);
    }

    // ---- /limit
    ax.bulk_limit = rd.has("/limit");
    if (ax.bulk_limit) {
      rd.group("/limit");
      each_f64(rd.f64("/limit/lambda_max", {hP}), &PointRecord::limit_lambda_max);
      each_f64(rd.f64("/limit/ks_density", {hP}), &PointRecord::limit_ks_density);
      each_f64(rd.f64("/limit/accuracy", {hP}), &PointRecord::limit_accuracy);
      each_row(rd.f64("/limit/histogram/counts", {hP, B}), static_cast<std::size_t>(B),
               &PointRecord::limit_hist_counts);
      each_row(rd.f64("/limit/histogram/edges", {hP, E}), static_cast<std::size_t>(E),
               &PointRecord::limit_hist_edges);
    }
  }

  // ---- /bounds
  {
    rd.group("/bounds");
    const hsize_t L = rd.length("/bounds/region_size"), N = rd.length("/bounds/local_dim");
    ax.region_sizes = rd.i64("/bounds/region_size", {L});
    ax.local_dims = rd.i64("/bounds/local_dim", {N});
    const std::size_t l = static_cast<std::size_t>(L), m = static_cast<std::size_t>(N);
    {  // int64 rows [ell]: all -1 (not computed) comes back empty
      const std::vector<std::int64_t> v = rd.i64("/bounds/cuts", {hP, L});
      for (std::size_t i = 0; i < n; ++i) {
        const auto b = v.begin() + static_cast<std::ptrdiff_t>(i * l), en = b + static_cast<std::ptrdiff_t>(l);
        if (std::all_of(b, en, [](std::int64_t x) { return x == -1; }))
          recs[i].cuts = {};
        else
          recs[i].cuts = {b, en};
      }
    }
    each_row(rd.f64("/bounds/lyapunov_rate", {hP, L}), l, &PointRecord::lyapunov_rate);
    each_row(rd.f64("/bounds/hilbert_cap", {hP, L, N}), l * m, &PointRecord::hilbert_cap);
    each_row(rd.f64("/bounds/lightcone_rate", {hP, L, N}), l * m, &PointRecord::lightcone_rate);
    each_row(rd.f64("/bounds/ehrenfest_time", {hP, N}), m, &PointRecord::ehrenfest_time);
    each_row(rd.f64("/bounds/saturation_lyapunov", {hP, L, N}), l * m,
             &PointRecord::saturation_lyapunov);
    each_row(rd.f64("/bounds/saturation_lightcone", {hP, L, N}), l * m,
             &PointRecord::saturation_lightcone);
  }

  // ---- /entanglement (optional: runs with an [entanglement] table)
  // ---- the diagnostics, as the file's schema declares them
  {
    const std::string text = rd.str_or(root, "schema", "");
    try {
      ax.schema = Schema::parse(text);
    } catch (const std::exception& e) {
      bad_file(path, std::string("corrupt: root attribute schema: ") + e.what());
    }
    const std::string v = ax.schema.validate();
    if (!v.empty()) bad_file(path, "corrupt: root attribute schema: " + v);
    const std::string h = rd.str_or(root, "schema_hash", "");
    if (h != ax.schema.hash())
      bad_file(path, "corrupt: root attribute schema_hash " + h + " does not match its schema (" + ax.schema.hash() + ")");
    const Schema& sc = ax.schema;
    for (const CoordDecl& cd : sc.coords) {
      std::vector<hsize_t> shape;
      for (const auto& d : cd.dims) shape.push_back(d == cd.path ? cd.size() : sc.axis(d)->size());
      const bool same = cd.type == Elem::F64 ? rd.f64(cd.path, shape) == cd.f : rd.i64(cd.path, shape) == cd.i;
      if (!same) bad_file(path, "corrupt: " + cd.path + " differs from its declaration in the schema");
    }
    for (auto& r : recs) r.fields.resize(sc.fields.size());
    for (std::size_t k = 0; k < sc.fields.size(); ++k) {
      const FieldDecl& fd = sc.fields[k];
      std::vector<hsize_t> shape{hP};
      std::size_t w = 1;
      for (auto x : sc.inner_shape(k)) {
        shape.push_back(static_cast<hsize_t>(x));
        w *= static_cast<std::size_t>(x);
      }
      if (fd.type == Elem::F64) {
        const std::vector<double> v = rd.f64(fd.path, shape);
        for (std::size_t i = 0; i < n; ++i) recs[i].fields[k] = unpad_row(sc, k, v.data() + i * w, nullptr);
      } else {
        const std::vector<std::int64_t> v = rd.i64(fd.path, shape);
        for (std::size_t i = 0; i < n; ++i) recs[i].fields[k] = unpad_row(sc, k, nullptr, v.data() + i * w);
      }
    }
    // A record with no value at all held none (the diagnostics were not run).
    for (auto& r : recs)
      if (std::all_of(r.fields.begin(), r.fields.end(), [](const FieldValue& x) { return x.empty(); })) r.fields.clear();
  }

  if (rd.has("/stats")) {
    h5::Group g = rd.group("/stats");
    EnsembleStats& st = out.stats;
    st.param_names = rd.strs(g, "parameters");
    const std::vector<std::string> cols = rd.strs(g, "columns");
    const hsize_t G = rd.length("/stats/count");
    st.count = rd.i64("/stats/count", {G});
    const std::size_t np = st.param_names.size(), ng = static_cast<std::size_t>(G);
    st.params.assign(ng * np, 0);
    for (std::size_t p = 0; p < np; ++p) {
      const auto v = rd.i64("/stats/" + st.param_names[p], {G});
      for (std::size_t i = 0; i < ng; ++i) st.params[i * np + p] = v[i];
    }
    for (const auto& name : cols) {
      StatsColumn c;
      c.name = name;
      const std::string base = "/stats/" + name;
      h5::Group cg = rd.group(base);
      c.units = rd.str_or(cg, "units", "");
      c.meaning = rd.str_or(cg, "meaning", "");
      if (h5::has_attr(cg, "axes")) c.inner_dims = rd.strs(cg, "axes");
      const auto d = h5::dims(rd.dataset(base + "/mean"));
      if (d.empty() || d[0] != G)
        bad_file(path, "corrupt: " + base + "/mean has shape " + shape_text(d) + ", expected " +
                           std::to_string(G) + " rows");
      for (std::size_t a = 1; a < d.size(); ++a) c.inner.push_back(d[a]);
      c.mean = rd.f64(base + "/mean", d);
      c.std = rd.f64(base + "/std", d);
      c.sem = rd.f64(base + "/sem", d);
      c.median = rd.f64(base + "/median", d);
      st.columns.push_back(std::move(c));
    }
  }
  return out;
}

}  // namespace

ResultData read_results(const std::string& path) {
  h5::QuietErrors quiet;
  {
    std::error_code ec;
    const fs::file_status s = fs::status(path, ec);
    if (!fs::exists(s)) throw ResultFileError("read_results: '" + path + "': no such file");
    if (fs::is_directory(s)) throw ResultFileError("read_results: '" + path + "': is a directory");
    if (::access(path.c_str(), R_OK) != 0)
      throw ResultFileError("read_results: '" + path + "': cannot read it: " + std::strerror(errno));
  }
  const htri_t is_h5 = H5Fis_hdf5(path.c_str());
  if (is_h5 == 0) bad_file(path, "not a toral result file (not an HDF5 file)");
  H5Eclear2(H5E_DEFAULT);
  try {
    // Plain serial access (sec2 driver), read-only.
    h5::PropList fapl(H5Pcreate(H5P_FILE_ACCESS), H5Pclose, path, "/");
    // Closing the file closes everything still open in it, also after a
    // failure deep inside a corrupt file.
    if (!fapl || H5Pset_fapl_sec2(fapl.id()) < 0 ||
        H5Pset_fclose_degree(fapl.id(), H5F_CLOSE_STRONG) < 0)
      bad_file(path, "cannot set up HDF5 file access (" + innermost_h5_error() + ")");
    const hid_t f = H5Fopen(path.c_str(), H5F_ACC_RDONLY, fapl.id());
    if (f < 0) bad_file(path, "corrupt: HDF5 cannot open it (" + innermost_h5_error() + ")");
    Reader rd(path, h5::File(f, H5Fclose, path, "/"));
    return read_file(rd);
  } catch (const ResultFileError&) {
    throw;
  } catch (const std::exception& e) {
    bad_file(path, std::string("corrupt: ") + e.what());
  }
}

}  // namespace toral
