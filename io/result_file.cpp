#include "result_file.hpp"

#include <fcntl.h>
#include <unistd.h>

#include <algorithm>
#include <cerrno>
#include <cstdio>
#include <cstring>
#include <ctime>
#include <filesystem>
#include <limits>
#include <random>
#include <sstream>

#include "h5.hpp"

#ifndef TORAL_VERSION
#define TORAL_VERSION "unknown"
#endif

namespace toral {

namespace fs = std::filesystem;

namespace {

// ---------------------------------------------------------------- MPI helpers

int comm_rank(MPI_Comm c) {
  int r = 0;
  MPI_Comm_rank(c, &r);
  return r;
}
int comm_size(MPI_Comm c) {
  int s = 1;
  MPI_Comm_size(c, &s);
  return s;
}

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
void bcast(MPI_Comm c, std::int64_t& x) { MPI_Bcast(&x, 1, MPI_INT64_T, 0, c); }
void bcast(MPI_Comm c, int& x) { MPI_Bcast(&x, 1, MPI_INT, 0, c); }

// Error kinds agreed between ranks.
enum : int { kOk = 0, kExists = 1, kOther = 2 };

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

// ---------------------------------------------------------------- checks

// Rank-0-local check of the output target; returns (kind, message).
std::pair<int, std::string> target_problem(const std::string& path, bool overwrite) {
  if (path.empty()) return {kOther, "output path is empty"};
  std::error_code ec;
  const fs::path p(path);
  fs::path dir = p.parent_path();
  if (dir.empty()) dir = ".";
  if (!fs::is_directory(dir, ec))
    return {kOther, "output directory '" + dir.string() + "' of '" + path + "' does not exist"};
  if (::access(dir.c_str(), W_OK | X_OK) != 0)
    return {kOther, "output directory '" + dir.string() + "' of '" + path + "' is not writable"};
  const fs::file_status st = fs::symlink_status(p, ec);
  if (fs::exists(st) || fs::is_symlink(st)) {
    if (fs::is_directory(fs::status(p, ec)))
      return {kOther, "output path '" + path + "' is a directory"};
    if (!overwrite)
      return {kExists, "output file '" + path +
                           "' already exists; refusing to overwrite it (pass --overwrite to "
                           "replace it)"};
  }
  return {kOk, {}};
}

std::string temp_name(const std::string& path) {
  std::random_device rd;
  std::ostringstream s;
  s << path << ".partial." << ::getpid() << "." << std::hex << (rd() & 0xffffffu);
  return s.str();
}

// Moves tmp onto path. Without overwrite, never replaces an existing file.
std::pair<int, std::string> publish(const std::string& tmp, const std::string& path,
                                    bool overwrite) {
  auto sys = [&](const char* what) {
    return std::string(what) + " '" + tmp + "' -> '" + path + "' failed: " + std::strerror(errno);
  };
  auto exists_msg = [&] {
    return "output file '" + path +
           "' appeared while the run was writing; refusing to overwrite it (pass --overwrite to "
           "replace it)";
  };
  if (overwrite) {
    if (std::rename(tmp.c_str(), path.c_str()) != 0) return {kOther, sys("rename")};
    return {kOk, {}};
  }
  if (::renameat2(AT_FDCWD, tmp.c_str(), AT_FDCWD, path.c_str(), RENAME_NOREPLACE) == 0)
    return {kOk, {}};
  if (errno == EEXIST) return {kExists, exists_msg()};
  if (errno != EINVAL && errno != ENOSYS && errno != ENOTSUP && errno != EPERM)
    return {kOther, sys("rename")};
  // The file system lacks RENAME_NOREPLACE: a hard link is also atomic.
  if (::link(tmp.c_str(), path.c_str()) == 0) {
    ::unlink(tmp.c_str());
    return {kOk, {}};
  }
  if (errno == EEXIST) return {kExists, exists_msg()};
  // No hard links either: check, then rename (a small race remains).
  if (output_exists(path)) return {kExists, exists_msg()};
  if (std::rename(tmp.c_str(), path.c_str()) != 0) return {kOther, sys("rename")};
  return {kOk, {}};
}

// Rank-local validation of the records against the axes.
std::string validate(const std::vector<const PointRecord*>& recs, const RunAxes& ax,
                     std::int64_t total) {
  const std::size_t nl = ax.region_sizes.size(), nn = ax.local_dims.size();
  const std::size_t bins = static_cast<std::size_t>(std::max(ax.hist_bins, 0));
  const std::size_t edges = bins > 0 ? bins + 1 : 0;
  for (std::size_t i = 0; i < recs.size(); ++i) {
    const PointRecord& r = *recs[i];
    const std::string at = "point " + std::to_string(r.index);
    auto len = [&](const std::vector<double>& v, std::size_t want, const char* name) -> std::string {
      if (v.empty() || v.size() == want) return {};
      return at + ": " + name + " has " + std::to_string(v.size()) + " values, expected " +
             std::to_string(want) + " (or none)";
    };
    if (r.index < 0 || r.index >= total)
      return at + ": index outside 0.." + std::to_string(total - 1);
    if (i > 0 && recs[i - 1]->index == r.index) return at + ": passed twice";
    if (r.params.size() != ax.param_names.size())
      return at + ": " + std::to_string(r.params.size()) + " parameters, expected " +
             std::to_string(ax.param_names.size());
    for (const std::string& e :
         {len(r.hist_counts, bins, "hist_counts"), len(r.hist_edges, edges, "hist_edges"),
          len(r.limit_hist_counts, bins, "limit_hist_counts"),
          len(r.limit_hist_edges, edges, "limit_hist_edges"),
          len(r.lyapunov_rate, nl, "lyapunov_rate"), len(r.hilbert_cap, nl * nn, "hilbert_cap"),
          len(r.lightcone_rate, nn, "lightcone_rate"),
          len(r.ehrenfest_time, nn, "ehrenfest_time"),
          len(r.saturation_lyapunov, nl * nn, "saturation_lyapunov"),
          len(r.saturation_lightcone, nl * nn, "saturation_lightcone")})
      if (!e.empty()) return e;
  }
  return {};
}

// ---------------------------------------------------------------- writing

struct Ctx {
  const h5::Object* parent = nullptr;
  std::vector<std::int64_t> rows;  // this rank's global rows, ascending
  std::int64_t total = 0;
};

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

void write_file(MPI_Comm comm, const std::string& file, const RunAxes& ax, const RunMeta& meta,
                std::int64_t total, const std::vector<const PointRecord*>& recs, std::size_t K) {
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

    Ctx c;
    c.total = total;
    for (const auto* r : recs) c.rows.push_back(r->index);

    // ---- /points
    {
      h5::Group g = h5::create_group(root, "points");
      c.parent = &g;
      h5::set_attr(g, "meaning", "one entry per sweep point; row i is point i in expansion order");
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
      {
        std::vector<std::int32_t> st, me;
        for (const auto* r : recs) {
          st.push_back(r->status);
          me.push_back(r->method);
        }
        put(c, "status", H5T_STD_I32LE, H5T_NATIVE_INT32, {}, st, "",
            "point status: 0 ok, else an error code (attribute labels); failed points hold NaN "
            "results");
        h5::Dataset ds = h5::open_dataset(g, "status");
        h5::set_attr(ds, "labels", status_labels());
        ds.close();
        put(c, "method", H5T_STD_I32LE, H5T_NATIVE_INT32, {}, me, "",
            "spectrum method used (attribute labels: 0 none, 1 bloch, 2 dense, 3 krylov)");
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
              "number of exponents above the zero tolerance; -1 when not computed");
      put_f64(c, "exponents", {hk},
              rows_of(recs, K, [](const PointRecord& r) -> const auto& { return r.exponents; }),
              "1/period",
              "kept Lyapunov exponents, descending; NaN padded beyond exponent_count");
      put_i64(c, "exponent_count",
              icolumn(recs,
                      [](const PointRecord& r) { return static_cast<std::int64_t>(r.exponents.size()); }),
              "1", "number of real (non-padding) entries in the row of exponents");
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
                   "entanglement-growth bounds per point over region sizes ell (region_size) and "
                   "local dimensions N (local_dim)");
      put_coord(g, rank == 0, "region_size", ax.region_sizes, "sites",
                "region size ell: axis 1 of lyapunov_rate, hilbert_cap and saturation_*");
      put_coord(g, rank == 0, "local_dim", ax.local_dims, "1",
                "local Hilbert-space dimension N: last axis of hilbert_cap, lightcone_rate, "
                "ehrenfest_time and saturation_*");
      put_i64(c, "cuts", icolumn(recs, [](const PointRecord& r) { return r.cuts; }), "1",
              "boundary cuts of the region, each crossed by one gate per period; -1 when not "
              "computed");
      put_f64(c, "lyapunov_rate", {hl},
              rows_of(recs, nl, [](const PointRecord& r) -> const auto& { return r.lyapunov_rate; }),
              "nats/period",
              "entropy growth rate bound of an ell-site region: sum of the 2 min(ell, L-ell) "
              "largest exponents; NaN where not applicable");
      put_f64(c, "hilbert_cap", {hl, hn},
              rows_of(recs, nl * nn, [](const PointRecord& r) -> const auto& { return r.hilbert_cap; }),
              "nats", "maximal entropy of an ell-site region of N-level sites, [ell][N]");
      put_f64(c, "lightcone_rate", {hn},
              rows_of(recs, nn, [](const PointRecord& r) -> const auto& { return r.lightcone_rate; }),
              "nats/period", "light-cone bound on the entropy growth rate, [N]");
      put_f64(c, "ehrenfest_time", {hn},
              rows_of(recs, nn, [](const PointRecord& r) -> const auto& { return r.ehrenfest_time; }),
              "periods", "Ehrenfest time, [N]");
      put_f64(c, "saturation_lyapunov", {hl, hn},
              rows_of(recs, nl * nn,
                      [](const PointRecord& r) -> const auto& { return r.saturation_lyapunov; }),
              "periods", "time to reach hilbert_cap at lyapunov_rate, [ell][N]");
      put_f64(c, "saturation_lightcone", {hl, hn},
              rows_of(recs, nl * nn,
                      [](const PointRecord& r) -> const auto& { return r.saturation_lightcone; }),
              "periods", "time to reach hilbert_cap at lightcone_rate, [ell][N]");
      g.close();
    }
    root.close();
  }
  f.close();
}

}  // namespace

// ---------------------------------------------------------------- public

const std::vector<std::string>& status_labels() {
  static const std::vector<std::string> v{"ok",           "invalid_model", "overflow",
                                          "solver_failed", "no_method",     "internal_error"};
  return v;
}

const std::vector<std::string>& method_labels() {
  static const std::vector<std::string> v{"none", "bloch", "dense", "krylov"};
  return v;
}

std::string iso8601_utc_now() {
  const std::time_t t = std::time(nullptr);
  std::tm tm{};
  gmtime_r(&t, &tm);
  char buf[32];
  std::strftime(buf, sizeof buf, "%Y-%m-%dT%H:%M:%SZ", &tm);
  return buf;
}

bool output_exists(const std::string& path) {
  std::error_code ec;
  const fs::file_status st = fs::symlink_status(path, ec);
  return fs::exists(st) || fs::is_symlink(st);
}

void check_output_target(MPI_Comm comm, const std::string& path, bool overwrite) {
  std::pair<int, std::string> p{kOk, {}};
  if (comm_rank(comm) == 0) p = target_problem(path, overwrite);
  bcast(comm, p.first);
  bcast(comm, p.second);
  if (p.first != kOk) raise(p.first, p.second);
}

void write_results(MPI_Comm comm, const std::string& path, bool overwrite, const RunAxes& axes,
                   const RunMeta& meta, std::int64_t total_points,
                   const std::vector<PointRecord>& local) {
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
  bcast(comm, mt.toral_version);
  bcast(comm, mt.config_text);
  bcast(comm, mt.config_source);
  if (rank == 0 && mt.created.empty()) mt.created = iso8601_utc_now();
  bcast(comm, mt.created);
  if (rank == 0 && mt.ranks < 1) mt.ranks = comm_size(comm);
  bcast(comm, mt.ranks);
  bcast(comm, mt.sweep_names);

  {
    std::int64_t tot[2] = {total_points, -total_points}, red[2] = {0, 0};
    MPI_Allreduce(tot, red, 2, MPI_INT64_T, MPI_MIN, comm);
    if (red[0] != -red[1])
      raise(kOther, "write_results: total_points differs between ranks (" +
                        std::to_string(red[0]) + " .. " + std::to_string(-red[1]) + ")");
    if (total_points < 0) raise(kOther, "write_results: negative total_points");
    if (ax.hist_bins < 0) raise(kOther, "write_results: negative hist_bins");
  }

  std::vector<const PointRecord*> recs;
  recs.reserve(local.size());
  for (const auto& r : local) recs.push_back(&r);
  std::stable_sort(recs.begin(), recs.end(),
                   [](const PointRecord* a, const PointRecord* b) { return a->index < b->index; });
  {
    std::string e = validate(recs, ax, total_points);
    agree(comm, e.empty() ? kOk : kOther, e.empty() ? e : "write_results: " + e);
  }
  // Coverage: every index exactly once over all ranks. The local indices are
  // valid and unique, so count == total and union == all suffice.
  {
    long long n = static_cast<long long>(recs.size()), sum = 0;
    MPI_Allreduce(&n, &sum, 1, MPI_LONG_LONG, MPI_SUM, comm);
    const std::size_t nbytes = static_cast<std::size_t>((total_points + 7) / 8);
    std::vector<unsigned char> mine(nbytes, 0), all(nbytes, 0);
    for (const auto* r : recs) mine[static_cast<std::size_t>(r->index / 8)] |= 1u << (r->index % 8);
    const std::size_t chunk = 1u << 30;
    for (std::size_t off = 0; off < nbytes; off += chunk)
      MPI_Allreduce(mine.data() + off, all.data() + off, static_cast<int>(std::min(chunk, nbytes - off)),
                    MPI_UNSIGNED_CHAR, MPI_BOR, comm);
    std::int64_t missing = -1;
    for (std::int64_t i = 0; i < total_points && missing < 0; ++i)
      if (!(all[static_cast<std::size_t>(i / 8)] & (1u << (i % 8)))) missing = i;
    if (missing >= 0)
      raise(kOther, "write_results: no rank passed point " + std::to_string(missing) + " of " +
                        std::to_string(total_points));
    if (sum != total_points)
      raise(kOther, "write_results: " + std::to_string(sum) + " records for " +
                        std::to_string(total_points) + " points: some point was passed by more "
                                                       "than one rank");
  }

  unsigned long long kmine = 0, K = 0;
  for (const auto* r : recs) kmine = std::max<unsigned long long>(kmine, r->exponents.size());
  MPI_Allreduce(&kmine, &K, 1, MPI_UNSIGNED_LONG_LONG, MPI_MAX, comm);

  std::string tmp;
  if (rank == 0) tmp = temp_name(where);
  bcast(comm, tmp);

  std::string err;
  try {
    write_file(comm, tmp, ax, mt, total_points, recs, static_cast<std::size_t>(K));
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
    pub = publish(tmp, where, overwrite);
    if (pub.first != kOk) std::remove(tmp.c_str());
  }
  bcast(comm, pub.first);
  bcast(comm, pub.second);
  if (pub.first != kOk) raise(pub.first, pub.second);
}

}  // namespace toral
