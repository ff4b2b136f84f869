// Tests of io/: the HDF5 RAII layer and the result-file layout (version 1).
// Runs with any number of MPI ranks (ctest runs it with 1 and 2). Files are
// written collectively and read back on rank 0 with the serial HDF5 C API.
#include <gtest/gtest.h>
#include <hdf5.h>
#include <mpi.h>

#include <algorithm>
#include <cmath>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <functional>
#include <map>
#include <sstream>
#include <string>
#include <vector>

#include "h5.hpp"
#include "result_file.hpp"

namespace fs = std::filesystem;
using namespace toral;

namespace {

int g_rank = 0, g_size = 1;
std::string g_dir;  // shared scratch directory (same path on every rank)

std::string scratch(const std::string& name) { return g_dir + "/" + name; }

void barrier() { MPI_Barrier(MPI_COMM_WORLD); }

// Runs checks on rank 0 only, then a barrier on every rank. An exception in
// the checks is a test failure, and the barrier is still reached, so the
// ranks stay in step.
void on_rank0(const std::function<void()>& checks) {
  if (g_rank == 0) {
    try {
      checks();
    } catch (const std::exception& e) {
      ADD_FAILURE() << "exception on rank 0: " << e.what();
    }
  }
  MPI_Barrier(MPI_COMM_WORLD);
}

// ---------------------------------------------------------------- synthetic run

constexpr std::int64_t kP = 11;  // points
const std::vector<std::int64_t> kEll = {1, 2, 3};
const std::vector<std::int64_t> kN = {2, 5};
constexpr int kBins = 4;
constexpr std::int64_t kFailed = 3, kFailedLong = 7, kNoBounds = 6;

RunAxes make_axes(bool bulk = true) {
  RunAxes a;
  a.param_names = {"sweep", "sites", "seed"};
  a.param_meanings = {"index into sweep_names", "lattice size L", "disorder seed"};
  a.swept = {"sweep", "sites", "seed"};
  a.region_sizes = kEll;
  a.local_dims = kN;
  a.hist_bins = kBins;
  a.bulk_limit = bulk;
  return a;
}

RunMeta make_meta(const std::string& tag = "first") {
  RunMeta m;
  m.toral_version = "9.8.7";
  m.config_text = "title = \"" + tag + "\"\n[[sweep]]\nname = \"a\"\n# caf\xc3\xa9\n";
  m.config_source = "/some/dir/run.toml";
  m.created = "2024-01-02T03:04:05Z";
  m.ranks = g_size;
  m.sweep_names = {"a", "b"};
  return m;
}

std::string long_message() {
  // 400 bytes: "xy" then two-byte characters, so that byte 255 (the last
  // one that fits) is the first half of a character and must be dropped.
  std::string s = "xy";
  while (s.size() < 400) s += "\xc3\xa9";  // e-acute
  return s;
}

PointRecord make_record(std::int64_t i) {
  PointRecord r;
  r.index = i;
  r.params = {i % 2, 4 + 2 * (i % 3), i / 3};
  if (i == kFailed || i == kFailedLong) {
    r.status = i == kFailed ? static_cast<std::int32_t>(PointStatus::SolverFailed)
                            : static_cast<std::int32_t>(PointStatus::InternalError);
    r.message = i == kFailed ? "solver did not converge (na\xc3\xafve)" : long_message();
    r.wall_time = 0.25;
    return r;  // everything else NaN / empty / -1
  }
  const double x = static_cast<double>(i);
  r.method = static_cast<std::int32_t>(1 + i % 3);
  r.wall_time = 0.1 * x + 0.01;
  r.lambda_max = 0.5 + x;
  r.ks_rate = 2.0 * x + 0.125;
  r.ks_density = r.ks_rate / 8.0;
  r.unstable_count = i;
  const std::size_t n = 1 + static_cast<std::size_t>((i * 3) % 7);  // ragged: 1..7
  for (std::size_t k = 0; k < n; ++k) r.exponents.push_back(x + 0.1 * static_cast<double>(n - k));
  r.pairing_defect = 1e-12 * x;
  r.sum_defect = 2e-12 * x;
  r.error_bound = 3e-12 * x;
  for (int b = 0; b < kBins; ++b) r.hist_counts.push_back(0.25 * (b + 1) / 2.5);
  for (int b = 0; b <= kBins; ++b) r.hist_edges.push_back(-r.lambda_max + b * 2 * r.lambda_max / kBins);
  if (i % 2 == 0) {  // translation-invariant points have a bulk limit
    r.limit_lambda_max = x + 0.75;
    r.limit_ks_density = x / 3.0;
    r.limit_accuracy = 1e-10;
    for (int b = 0; b < kBins; ++b) r.limit_hist_counts.push_back(0.1 * b);
    for (int b = 0; b <= kBins; ++b) r.limit_hist_edges.push_back(-1.0 + 0.5 * b);
  }
  if (i != kNoBounds) {
    r.cuts = 2;
    for (std::size_t l = 0; l < kEll.size(); ++l) r.lyapunov_rate.push_back(x + 0.01 * kEll[l]);
    for (std::size_t n2 = 0; n2 < kN.size(); ++n2) {
      r.lightcone_rate.push_back(2.0 * std::log(static_cast<double>(kN[n2])) + x);
      r.ehrenfest_time.push_back(std::log(static_cast<double>(kN[n2])) / r.lambda_max);
    }
    for (std::size_t l = 0; l < kEll.size(); ++l)
      for (std::size_t n2 = 0; n2 < kN.size(); ++n2) {
        const double cap = kEll[l] * std::log(static_cast<double>(kN[n2]));
        r.hilbert_cap.push_back(cap);
        r.saturation_lyapunov.push_back(cap / r.lyapunov_rate[l] + 1000.0 * l + 100.0 * n2);
        r.saturation_lightcone.push_back(cap / r.lightcone_rate[n2] + 10.0 * l + n2);
      }
  }
  return r;
}

std::vector<PointRecord> all_records(std::int64_t P = kP) {
  std::vector<PointRecord> v;
  for (std::int64_t i = 0; i < P; ++i) v.push_back(make_record(i));
  return v;
}

enum class Dist { Cyclic, UnevenReversed };

// This rank's share. UnevenReversed: rank 0 gets the first two points, the
// last rank the rest, and middle ranks nothing; each share in reverse order.
std::vector<PointRecord> my_records(Dist d, std::int64_t P = kP) {
  std::vector<PointRecord> v;
  for (std::int64_t i = 0; i < P; ++i) {
    int owner = 0;
    if (d == Dist::Cyclic)
      owner = static_cast<int>(i % g_size);
    else
      owner = (i < 2 || g_size == 1) ? 0 : g_size - 1;
    if (owner == g_rank) v.push_back(make_record(i));
  }
  if (d == Dist::UnevenReversed) std::reverse(v.begin(), v.end());
  return v;
}

// ---------------------------------------------------------------- reading (serial C API)

struct RFile {
  hid_t id = -1;
  explicit RFile(const std::string& p) {
    H5E_auto2_t f;
    void* d;
    H5Eget_auto2(H5E_DEFAULT, &f, &d);
    H5Eset_auto2(H5E_DEFAULT, nullptr, nullptr);
    id = H5Fopen(p.c_str(), H5F_ACC_RDONLY, H5P_DEFAULT);
    H5Eset_auto2(H5E_DEFAULT, f, d);
  }
  ~RFile() {
    if (id >= 0) H5Fclose(id);
  }
};

bool link_exists(hid_t f, const std::string& path) {
  // Check each component (H5Lexists needs the parents to exist).
  std::string cur;
  std::stringstream ss(path);
  std::string part;
  while (std::getline(ss, part, '/')) {
    if (part.empty()) continue;
    cur += "/" + part;
    if (H5Lexists(f, cur.c_str(), H5P_DEFAULT) <= 0) return false;
  }
  return true;
}

std::vector<hsize_t> shape_of(hid_t f, const std::string& path) {
  hid_t d = H5Dopen2(f, path.c_str(), H5P_DEFAULT);
  hid_t s = H5Dget_space(d);
  int n = H5Sget_simple_extent_ndims(s);
  std::vector<hsize_t> dims(static_cast<std::size_t>(std::max(n, 0)));
  if (n > 0) H5Sget_simple_extent_dims(s, dims.data(), nullptr);
  H5Sclose(s);
  H5Dclose(d);
  return dims;
}

bool type_is(hid_t f, const std::string& path, hid_t want) {
  hid_t d = H5Dopen2(f, path.c_str(), H5P_DEFAULT);
  hid_t t = H5Dget_type(d);
  const bool eq = H5Tequal(t, want) > 0;
  H5Tclose(t);
  H5Dclose(d);
  return eq;
}

template <class T>
std::vector<T> read_raw(hid_t f, const std::string& path, hid_t mem) {
  hid_t d = H5Dopen2(f, path.c_str(), H5P_DEFAULT);
  hid_t s = H5Dget_space(d);
  std::vector<T> v(static_cast<std::size_t>(H5Sget_simple_extent_npoints(s)));
  if (!v.empty()) {
    EXPECT_GE(H5Dread(d, mem, H5S_ALL, H5S_ALL, H5P_DEFAULT, v.data()), 0) << path;
  }
  H5Sclose(s);
  H5Dclose(d);
  return v;
}

bool same(double a, double b) { return (std::isnan(a) && std::isnan(b)) || a == b; }

std::string attr_string(hid_t f, const std::string& obj, const std::string& name) {
  h5::Object o(H5Oopen(f, obj.c_str(), H5P_DEFAULT), H5Oclose, "test", obj);
  return h5::read_attr_string(o, name);
}
std::vector<std::string> attr_strings(hid_t f, const std::string& obj, const std::string& name) {
  h5::Object o(H5Oopen(f, obj.c_str(), H5P_DEFAULT), H5Oclose, "test", obj);
  return h5::read_attr_strings(o, name);
}
std::int64_t attr_int(hid_t f, const std::string& obj, const std::string& name) {
  h5::Object o(H5Oopen(f, obj.c_str(), H5P_DEFAULT), H5Oclose, "test", obj);
  return h5::read_attr_int(o, name);
}

// Expected float64 dataset of shape (P, inner...) whose row i is row(i).
void expect_f64(hid_t f, const std::string& path, std::vector<hsize_t> dims,
                const std::function<std::vector<double>(const PointRecord&)>& row,
                const std::vector<PointRecord>& recs) {
  ASSERT_TRUE(link_exists(f, path)) << path;
  EXPECT_EQ(shape_of(f, path), dims) << path;
  EXPECT_TRUE(type_is(f, path, H5T_IEEE_F64LE)) << path;
  const auto v = read_raw<double>(f, path, H5T_NATIVE_DOUBLE);
  std::size_t w = 1;
  for (std::size_t k = 1; k < dims.size(); ++k) w *= dims[k];
  ASSERT_EQ(v.size(), recs.size() * w) << path;
  for (std::size_t i = 0; i < recs.size(); ++i) {
    const auto want = row(recs[i]);
    ASSERT_EQ(want.size(), w) << path;
    for (std::size_t k = 0; k < w; ++k)
      EXPECT_TRUE(same(v[i * w + k], want[k]))
          << path << " point " << i << " element " << k << ": " << v[i * w + k] << " vs " << want[k];
  }
}

void expect_i64(hid_t f, const std::string& path,
                const std::function<std::int64_t(const PointRecord&)>& val,
                const std::vector<PointRecord>& recs) {
  ASSERT_TRUE(link_exists(f, path)) << path;
  EXPECT_EQ(shape_of(f, path), std::vector<hsize_t>{recs.size()}) << path;
  EXPECT_TRUE(type_is(f, path, H5T_STD_I64LE)) << path;
  const auto v = read_raw<std::int64_t>(f, path, H5T_NATIVE_INT64);
  ASSERT_EQ(v.size(), recs.size());
  for (std::size_t i = 0; i < recs.size(); ++i) EXPECT_EQ(v[i], val(recs[i])) << path << " point " << i;
}

std::vector<double> pad(const std::vector<double>& x, std::size_t w) {
  std::vector<double> v(w, kNaN);
  std::copy_n(x.begin(), std::min(w, x.size()), v.begin());
  return v;
}

// Every dataset of the file (full paths).
std::vector<std::string> datasets_of(hid_t f) {
  std::vector<std::string> out;
  H5Ovisit(
      f, H5_INDEX_NAME, H5_ITER_INC,
      [](hid_t, const char* name, const H5O_info_t* info, void* data) -> herr_t {
        if (info->type == H5O_TYPE_DATASET)
          static_cast<std::vector<std::string>*>(data)->push_back(std::string("/") + name);
        return 0;
      },
      &out);
  return out;
}

std::vector<std::string> partial_files() {
  std::vector<std::string> v;
  for (const auto& e : fs::directory_iterator(g_dir))
    if (e.path().filename().string().find(".partial") != std::string::npos)
      v.push_back(e.path().string());
  return v;
}

std::string slurp(const std::string& p) {
  std::ifstream in(p, std::ios::binary);
  std::ostringstream s;
  s << in.rdbuf();
  return s.str();
}

// The complete check of a result file written from all_records(P).
void check_file(const std::string& path, const RunAxes& ax, const RunMeta& meta,
                std::int64_t P = kP) {
  RFile rf(path);
  ASSERT_GE(rf.id, 0) << "cannot open " << path;
  const hid_t f = rf.id;
  const auto recs = all_records(P);
  const hsize_t hP = static_cast<hsize_t>(P);
  const std::size_t nl = ax.region_sizes.size(), nn = ax.local_dims.size();

  // root attributes
  EXPECT_EQ(attr_string(f, "/", "toral_version"), meta.toral_version);
  EXPECT_EQ(attr_int(f, "/", "layout_version"), 1);
  EXPECT_EQ(attr_string(f, "/", "config"), meta.config_text);
  EXPECT_EQ(attr_string(f, "/", "config_source"), meta.config_source);
  EXPECT_EQ(attr_string(f, "/", "created"), meta.created);
  EXPECT_EQ(attr_int(f, "/", "ranks"), meta.ranks);
  EXPECT_EQ(attr_int(f, "/", "point_count"), P);
  EXPECT_EQ(attr_strings(f, "/", "sweep_names"), meta.sweep_names);

  // /points
  EXPECT_EQ(attr_strings(f, "/points", "swept"), ax.swept);
  EXPECT_EQ(attr_strings(f, "/points", "parameters"), ax.param_names);
  EXPECT_EQ(attr_int(f, "/points", "absent"), std::numeric_limits<std::int64_t>::min());
  for (std::size_t p = 0; p < ax.param_names.size(); ++p) {
    const std::string path = "/points/" + ax.param_names[p];
    expect_i64(f, path, [p](const PointRecord& r) { return r.params[p]; }, recs);
    EXPECT_EQ(attr_string(f, path, "meaning"), ax.param_meanings[p]);
  }
  ASSERT_TRUE(link_exists(f, "/points/status"));
  EXPECT_TRUE(type_is(f, "/points/status", H5T_STD_I32LE));
  EXPECT_TRUE(type_is(f, "/points/method", H5T_STD_I32LE));
  const auto st = read_raw<std::int32_t>(f, "/points/status", H5T_NATIVE_INT32);
  const auto me = read_raw<std::int32_t>(f, "/points/method", H5T_NATIVE_INT32);
  ASSERT_EQ(st.size(), hP);
  ASSERT_EQ(me.size(), hP);
  for (std::size_t i = 0; i < hP; ++i) {
    EXPECT_EQ(st[i], recs[i].status) << i;
    EXPECT_EQ(me[i], recs[i].method) << i;
  }
  EXPECT_EQ(attr_strings(f, "/points/method", "labels"),
            (std::vector<std::string>{"none", "bloch", "dense", "krylov"}));
  EXPECT_EQ(attr_strings(f, "/points/status", "labels")[0], "ok");
  EXPECT_EQ(attr_strings(f, "/points/status", "labels").size(), 6u);
  {
    ASSERT_TRUE(link_exists(f, "/points/message"));
    EXPECT_EQ(shape_of(f, "/points/message"), std::vector<hsize_t>{hP});
    h5::Object d(H5Dopen2(f, "/points/message", H5P_DEFAULT), H5Dclose, path, "/points/message");
    hid_t t = H5Dget_type(d.id());
    EXPECT_EQ(H5Tget_class(t), H5T_STRING);
    EXPECT_EQ(H5Tis_variable_str(t), 0);
    EXPECT_EQ(H5Tget_size(t), 256u);
    H5Tclose(t);
    h5::Dataset ds(H5Dopen2(f, "/points/message", H5P_DEFAULT), H5Dclose, path, "/points/message");
    const auto msgs = h5::read_fixed_strings(ds);
    ASSERT_EQ(msgs.size(), hP);
    for (std::size_t i = 0; i < hP; ++i) {
      if (static_cast<std::int64_t>(i) == kFailedLong) {
        // truncated to <= 255 bytes on a character boundary
        EXPECT_LE(msgs[i].size(), 255u);
        EXPECT_GE(msgs[i].size(), 250u);
        EXPECT_EQ(msgs[i], recs[i].message.substr(0, msgs[i].size()));
        EXPECT_EQ(msgs[i].size(), 254u);  // "xy" + 126 whole 2-byte characters
      } else {
        EXPECT_EQ(msgs[i], recs[i].message) << i;
      }
    }
  }
  expect_f64(f, "/points/wall_time", {hP}, [](const PointRecord& r) { return std::vector{r.wall_time}; }, recs);

  // /chaos
  std::size_t K = 0;
  for (const auto& r : recs) K = std::max(K, r.exponents.size());
  EXPECT_EQ(K, 7u);
  expect_f64(f, "/chaos/lambda_max", {hP}, [](const PointRecord& r) { return std::vector{r.lambda_max}; }, recs);
  expect_f64(f, "/chaos/ks_rate", {hP}, [](const PointRecord& r) { return std::vector{r.ks_rate}; }, recs);
  expect_f64(f, "/chaos/ks_density", {hP}, [](const PointRecord& r) { return std::vector{r.ks_density}; }, recs);
  expect_i64(f, "/chaos/unstable_count", [](const PointRecord& r) { return r.unstable_count; }, recs);
  expect_f64(f, "/chaos/exponents", {hP, K}, [K](const PointRecord& r) { return pad(r.exponents, K); }, recs);
  expect_i64(f, "/chaos/exponent_count",
             [](const PointRecord& r) { return static_cast<std::int64_t>(r.exponents.size()); }, recs);
  expect_f64(f, "/chaos/accuracy/pairing_defect", {hP}, [](const PointRecord& r) { return std::vector{r.pairing_defect}; }, recs);
  expect_f64(f, "/chaos/accuracy/sum_defect", {hP}, [](const PointRecord& r) { return std::vector{r.sum_defect}; }, recs);
  expect_f64(f, "/chaos/accuracy/error_bound", {hP}, [](const PointRecord& r) { return std::vector{r.error_bound}; }, recs);
  const std::size_t B = static_cast<std::size_t>(ax.hist_bins), E = B ? B + 1 : 0;
  expect_f64(f, "/chaos/histogram/counts", {hP, B}, [B](const PointRecord& r) { return pad(r.hist_counts, B); }, recs);
  expect_f64(f, "/chaos/histogram/edges", {hP, E}, [E](const PointRecord& r) { return pad(r.hist_edges, E); }, recs);

  // /limit
  EXPECT_EQ(link_exists(f, "/limit"), ax.bulk_limit);
  if (ax.bulk_limit) {
    expect_f64(f, "/limit/lambda_max", {hP}, [](const PointRecord& r) { return std::vector{r.limit_lambda_max}; }, recs);
    expect_f64(f, "/limit/ks_density", {hP}, [](const PointRecord& r) { return std::vector{r.limit_ks_density}; }, recs);
    expect_f64(f, "/limit/accuracy", {hP}, [](const PointRecord& r) { return std::vector{r.limit_accuracy}; }, recs);
    expect_f64(f, "/limit/histogram/counts", {hP, B}, [B](const PointRecord& r) { return pad(r.limit_hist_counts, B); }, recs);
    expect_f64(f, "/limit/histogram/edges", {hP, E}, [E](const PointRecord& r) { return pad(r.limit_hist_edges, E); }, recs);
  }

  // /bounds
  ASSERT_TRUE(link_exists(f, "/bounds/region_size"));
  EXPECT_EQ(read_raw<std::int64_t>(f, "/bounds/region_size", H5T_NATIVE_INT64), ax.region_sizes);
  EXPECT_EQ(read_raw<std::int64_t>(f, "/bounds/local_dim", H5T_NATIVE_INT64), ax.local_dims);
  EXPECT_TRUE(type_is(f, "/bounds/region_size", H5T_STD_I64LE));
  EXPECT_TRUE(type_is(f, "/bounds/local_dim", H5T_STD_I64LE));
  expect_i64(f, "/bounds/cuts", [](const PointRecord& r) { return r.cuts; }, recs);
  expect_f64(f, "/bounds/lyapunov_rate", {hP, nl}, [nl](const PointRecord& r) { return pad(r.lyapunov_rate, nl); }, recs);
  expect_f64(f, "/bounds/hilbert_cap", {hP, nl, nn}, [nl, nn](const PointRecord& r) { return pad(r.hilbert_cap, nl * nn); }, recs);
  expect_f64(f, "/bounds/lightcone_rate", {hP, nn}, [nn](const PointRecord& r) { return pad(r.lightcone_rate, nn); }, recs);
  expect_f64(f, "/bounds/ehrenfest_time", {hP, nn}, [nn](const PointRecord& r) { return pad(r.ehrenfest_time, nn); }, recs);
  expect_f64(f, "/bounds/saturation_lyapunov", {hP, nl, nn}, [nl, nn](const PointRecord& r) { return pad(r.saturation_lyapunov, nl * nn); }, recs);
  expect_f64(f, "/bounds/saturation_lightcone", {hP, nl, nn}, [nl, nn](const PointRecord& r) { return pad(r.saturation_lightcone, nl * nn); }, recs);

  // units and meaning on every dataset; the documented units pinned
  const std::map<std::string, std::string> units = {
      {"/points/wall_time", "s"},
      {"/chaos/lambda_max", "1/period"},
      {"/chaos/ks_rate", "nats/period"},
      {"/chaos/ks_density", "nats/(period*site)"},
      {"/chaos/exponents", "1/period"},
      {"/chaos/histogram/counts", "1"},
      {"/chaos/histogram/edges", "1/period"},
      {"/bounds/region_size", "sites"},
      {"/bounds/lyapunov_rate", "nats/period"},
      {"/bounds/hilbert_cap", "nats"},
      {"/bounds/lightcone_rate", "nats/period"},
      {"/bounds/ehrenfest_time", "periods"},
      {"/bounds/saturation_lyapunov", "periods"},
      {"/bounds/saturation_lightcone", "periods"},
  };
  const auto all = datasets_of(f);
  const std::size_t expected_count = ax.param_names.size() + 4 + 11 + (ax.bulk_limit ? 5 : 0) + 9;
  EXPECT_EQ(all.size(), expected_count);
  for (const auto& d : all) {
    h5::Object o(H5Oopen(f, d.c_str(), H5P_DEFAULT), H5Oclose, path, d);
    EXPECT_TRUE(h5::has_attr(o, "units")) << d;
    ASSERT_TRUE(h5::has_attr(o, "meaning")) << d;
    EXPECT_FALSE(h5::read_attr_string(o, "meaning").empty()) << d;
    if (units.count(d)) {
      EXPECT_EQ(h5::read_attr_string(o, "units"), units.at(d)) << d;
    }
  }
}

// Raw bytes of every dataset (read in its file type), by path.
std::map<std::string, std::string> dataset_bytes(const std::string& path) {
  std::map<std::string, std::string> out;
  RFile rf(path);
  EXPECT_GE(rf.id, 0) << path;
  if (rf.id < 0) return out;
  for (const auto& d : datasets_of(rf.id)) {
    hid_t ds = H5Dopen2(rf.id, d.c_str(), H5P_DEFAULT);
    hid_t t = H5Dget_type(ds);
    hid_t s = H5Dget_space(ds);
    const std::size_t n = static_cast<std::size_t>(H5Sget_simple_extent_npoints(s)) * H5Tget_size(t);
    std::string buf(n, '\0');
    if (n) H5Dread(ds, t, H5S_ALL, H5S_ALL, H5P_DEFAULT, buf.data());
    std::ostringstream key;
    key << d << " shape";
    for (auto x : shape_of(rf.id, d)) key << " " << x;
    out[d] = key.str() + "|" + buf;
    H5Sclose(s);
    H5Tclose(t);
    H5Dclose(ds);
  }
  return out;
}

// Rank 0 writes a small file with the given content; everyone waits.
void make_plain_file(const std::string& p, const std::string& content) {
  if (g_rank == 0) {
    std::ofstream o(p, std::ios::binary);
    o << content;
  }
  barrier();
}

}  // namespace

// ---------------------------------------------------------------- h5 layer

TEST(H5Layer, TruncateUtf8) {
  EXPECT_EQ(h5::truncate_utf8("abc", 5), "abc");
  EXPECT_EQ(h5::truncate_utf8("abcdef", 3), "abc");
  EXPECT_EQ(h5::truncate_utf8("a\xc3\xa9z", 2), "a");          // would split e-acute
  EXPECT_EQ(h5::truncate_utf8("a\xc3\xa9z", 3), "a\xc3\xa9");
  EXPECT_EQ(h5::truncate_utf8("\xe2\x82\xac\xe2\x82\xac", 4), "\xe2\x82\xac");  // euro signs
  EXPECT_EQ(h5::truncate_utf8("\xf0\x9f\x98\x80", 3), "");
  EXPECT_EQ(h5::truncate_utf8("", 0), "");
  const auto packed = h5::pack_fixed_strings({"ab", "", "a\xc3\xa9z"}, 3);
  EXPECT_EQ(std::string(packed.begin(), packed.end()), std::string("ab\0\0\0\0a\0\0", 9));
}

TEST(H5Layer, ErrorsNameFileAndObject) {
  const std::string missing = scratch("does_not_exist.h5");
  try {
    h5::open_file(missing);
    FAIL() << "no exception";
  } catch (const h5::Error& e) {
    EXPECT_NE(std::string(e.what()).find(missing), std::string::npos) << e.what();
    EXPECT_NE(std::string(e.what()).find("H5Fopen"), std::string::npos) << e.what();
  }
  const std::string p = scratch("errors.h5");
  {
    h5::File f = h5::create_file_parallel(p, MPI_COMM_WORLD);
    h5::Group g = h5::create_group(h5::root(f), "grp");
    try {
      h5::open_dataset(g, "nope");
      FAIL() << "no exception";
    } catch (const h5::Error& e) {
      EXPECT_NE(std::string(e.what()).find("/grp/nope"), std::string::npos) << e.what();
      EXPECT_NE(std::string(e.what()).find(p), std::string::npos) << e.what();
    }
    g.close();
    f.close();
  }
  barrier();
}

TEST(H5Layer, MoveOnlyHandles) {
  static_assert(!std::is_copy_constructible_v<h5::Dataset>);
  static_assert(std::is_nothrow_move_constructible_v<h5::File>);
  h5::Datatype a = h5::fixed_string_type(8);
  const hid_t id = a.id();
  h5::Datatype b = std::move(a);
  EXPECT_EQ(b.id(), id);
  EXPECT_FALSE(static_cast<bool>(a));
  b = h5::vl_string_type();  // closes the old one
  EXPECT_LT(H5Iis_valid(id), 1);
}

// Rows in many patterns (runs, strided, irregular, empty ranks), 3-D rows.
TEST(H5Layer, WriteRowsPatterns) {
  const std::string p = scratch("rows.h5");
  const hsize_t R = 97, A = 3, B = 2;
  using Owner = std::function<int(std::int64_t)>;
  const std::vector<std::pair<std::string, Owner>> patterns = {
      {"cyclic", [](std::int64_t i) { return static_cast<int>(i % g_size); }},
      {"blocks", [](std::int64_t i) { return static_cast<int>(i * g_size / 97); }},
      {"irregular", [](std::int64_t i) { return static_cast<int>((i * i * 7 + i / 5) % g_size); }},
      {"all_on_last", [](std::int64_t) { return g_size - 1; }},
      {"pairs", [](std::int64_t i) { return static_cast<int>((i / 2) % g_size); }},
  };
  auto value = [](std::int64_t i, hsize_t a, hsize_t b) { return 1000.0 * i + 10.0 * a + b; };
  {
    h5::File f = h5::create_file_parallel(p, MPI_COMM_WORLD);
    h5::Group root = h5::root(f);
    for (const auto& [name, owner] : patterns) {
      h5::Dataset d = h5::create_dataset(root, name, H5T_IEEE_F64LE, {R, A, B}, true);
      std::vector<std::int64_t> rows;
      std::vector<double> buf;
      for (std::int64_t i = 0; i < static_cast<std::int64_t>(R); ++i)
        if (owner(i) == g_rank) {
          rows.push_back(i);
          for (hsize_t a = 0; a < A; ++a)
            for (hsize_t b = 0; b < B; ++b) buf.push_back(value(i, a, b));
        }
      h5::write_rows(d, rows, buf.data(), H5T_NATIVE_DOUBLE);
    }
    // two passes over an irregular subset and its complement: irregular
    // selections even with one rank
    {
      h5::Dataset d = h5::create_dataset(root, "two_pass", H5T_IEEE_F64LE, {R, A, B}, true);
      for (int pass = 0; pass < 2; ++pass) {
        std::vector<std::int64_t> rows;
        std::vector<double> buf;
        for (std::int64_t i = 0; i < static_cast<std::int64_t>(R); ++i) {
          const bool first = (i * i * 7 + i / 5) % 3 == 0;
          if (first != (pass == 0) || i % g_size != g_rank) continue;
          rows.push_back(i);
          for (hsize_t a = 0; a < A; ++a)
            for (hsize_t b = 0; b < B; ++b) buf.push_back(value(i, a, b));
        }
        h5::write_rows(d, rows, buf.data(), H5T_NATIVE_DOUBLE);
      }
    }
    // unsorted rows are refused before any collective call
    h5::Dataset bad = h5::create_dataset(root, "bad", H5T_STD_I64LE, {4});
    std::vector<std::int64_t> rows{2, 1}, v{0, 0};
    EXPECT_THROW(h5::write_rows(bad, rows, v.data(), H5T_NATIVE_INT64), h5::Error);
    std::vector<std::int64_t> all{0, 1, 2, 3};
    h5::write_all(bad, g_rank == 0, all.data(), H5T_NATIVE_INT64);
    bad.close();
    root.close();
    f.close();
  }
  barrier();
  on_rank0([&] {
    RFile rf(p);
    ASSERT_GE(rf.id, 0);
    for (const auto& [name, owner] : patterns) {
      const auto v = read_raw<double>(rf.id, "/" + name, H5T_NATIVE_DOUBLE);
      ASSERT_EQ(v.size(), R * A * B);
      for (hsize_t i = 0; i < R; ++i)
        for (hsize_t a = 0; a < A; ++a)
          for (hsize_t b = 0; b < B; ++b)
            ASSERT_EQ(v[(i * A + a) * B + b], value(static_cast<std::int64_t>(i), a, b)) << name << " row " << i;
    }
    {
      const auto v = read_raw<double>(rf.id, "/two_pass", H5T_NATIVE_DOUBLE);
      ASSERT_EQ(v.size(), R * A * B);
      for (hsize_t i = 0; i < R; ++i)
        for (hsize_t a = 0; a < A; ++a)
          for (hsize_t b = 0; b < B; ++b)
            ASSERT_EQ(v[(i * A + a) * B + b], value(static_cast<std::int64_t>(i), a, b)) << "two_pass row " << i;
    }
    EXPECT_EQ(read_raw<std::int64_t>(rf.id, "/bad", H5T_NATIVE_INT64), (std::vector<std::int64_t>{0, 1, 2, 3}));
  });
}

TEST(H5Layer, AttributesRoundTrip) {
  const std::string p = scratch("attrs.h5");
  {
    h5::File f = h5::create_file_parallel(p, MPI_COMM_WORLD);
    h5::Group r = h5::root(f);
    h5::set_attr(r, "s", std::string("h\xc3\xa9llo"));
    h5::set_attr(r, "list", std::vector<std::string>{"a", "", "ccc"});
    h5::set_attr(r, "empty", std::vector<std::string>{});
    h5::set_attr(r, "i", std::int64_t{-42});
    h5::set_attr(r, "d", 2.5);
    h5::set_attr(r, "ints", std::vector<std::int64_t>{1, 2, 3});
    h5::set_attr(r, "i", std::int64_t{43});  // replaced
    r.close();
    f.close();
  }
  barrier();
  on_rank0([&] {
    h5::File f = h5::open_file(p);
    h5::Group r = h5::root(f);
    EXPECT_EQ(h5::read_attr_string(r, "s"), "h\xc3\xa9llo");
    EXPECT_EQ(h5::read_attr_strings(r, "list"), (std::vector<std::string>{"a", "", "ccc"}));
    EXPECT_TRUE(h5::read_attr_strings(r, "empty").empty());
    EXPECT_EQ(h5::read_attr_int(r, "i"), 43);
    EXPECT_EQ(h5::read_attr_double(r, "d"), 2.5);
    EXPECT_TRUE(h5::has_attr(r, "ints"));
    EXPECT_FALSE(h5::has_attr(r, "nope"));
    EXPECT_THROW(h5::read_attr_string(r, "list"), h5::Error);
  });
}

// ---------------------------------------------------------------- result file

TEST(ResultFile, LayoutCyclic) {
  const std::string p = scratch("cyclic.h5");
  write_results(MPI_COMM_WORLD, p, false, make_axes(), make_meta(), kP, my_records(Dist::Cyclic));
  barrier();
  on_rank0([&] {
    check_file(p, make_axes(), make_meta());
    EXPECT_TRUE(partial_files().empty());
  });
}

TEST(ResultFile, LayoutUnevenUnsorted) {
  const std::string p = scratch("uneven.h5");
  write_results(MPI_COMM_WORLD, p, false, make_axes(), make_meta(), kP,
                my_records(Dist::UnevenReversed));
  barrier();
  on_rank0([&] {
    check_file(p, make_axes(), make_meta());
    EXPECT_TRUE(partial_files().empty());
  });
}

TEST(ResultFile, NoLimitGroupWithoutBulkLimit) {
  const std::string p = scratch("nolimit.h5");
  write_results(MPI_COMM_WORLD, p, false, make_axes(false), make_meta(), kP, my_records(Dist::Cyclic));
  barrier();
  on_rank0([&] { check_file(p, make_axes(false), make_meta()); });
}

// Same records -> identical bytes in every dataset, whatever the ranks and
// the distribution. The 1-rank reference is written by rank 0 alone on
// MPI_COMM_SELF.
TEST(ResultFile, DatasetsIndependentOfRanks) {
  const std::string ref = scratch("ref_one_rank.h5");
  on_rank0([&] {
    write_results(MPI_COMM_SELF, ref, false, make_axes(), make_meta(), kP, all_records());
  });
  const std::string a = scratch("dist_cyclic.h5"), b = scratch("dist_uneven.h5");
  write_results(MPI_COMM_WORLD, a, false, make_axes(), make_meta(), kP, my_records(Dist::Cyclic));
  write_results(MPI_COMM_WORLD, b, false, make_axes(), make_meta(), kP,
                my_records(Dist::UnevenReversed));
  barrier();
  on_rank0([&] {
    const auto r = dataset_bytes(ref), x = dataset_bytes(a), y = dataset_bytes(b);
    EXPECT_GT(r.size(), 30u);
    EXPECT_EQ(r.size(), x.size());
    for (const auto& [k, v] : r) {
      ASSERT_TRUE(x.count(k)) << k;
      ASSERT_TRUE(y.count(k)) << k;
      EXPECT_TRUE(v == x.at(k)) << "cyclic differs in " << k;
      EXPECT_TRUE(v == y.at(k)) << "uneven differs in " << k;
    }
  });
}

TEST(ResultFile, RefusesExistingFileWithoutOverwrite) {
  const std::string p = scratch("existing.h5");
  const std::string content = "precious bytes, not HDF5\n";
  make_plain_file(p, content);
  try {
    check_output_target(MPI_COMM_WORLD, p, false);
    ADD_FAILURE() << "check_output_target did not throw";
  } catch (const OutputExistsError& e) {
    EXPECT_NE(std::string(e.what()).find(p), std::string::npos) << e.what();
  }
  try {
    write_results(MPI_COMM_WORLD, p, false, make_axes(), make_meta(), kP, my_records(Dist::Cyclic));
    ADD_FAILURE() << "write_results did not throw";
  } catch (const OutputExistsError& e) {
    EXPECT_NE(std::string(e.what()).find(p), std::string::npos) << e.what();
    EXPECT_NE(std::string(e.what()).find("exists"), std::string::npos) << e.what();
  }
  barrier();
  on_rank0([&] {
    EXPECT_EQ(slurp(p), content);
    EXPECT_TRUE(partial_files().empty());
    EXPECT_TRUE(output_exists(p));
    EXPECT_FALSE(output_exists(scratch("nothing_here.h5")));
  });
}

TEST(ResultFile, OverwriteReplacesWithFlag) {
  const std::string p = scratch("replace.h5");
  make_plain_file(p, "old junk\n");
  EXPECT_NO_THROW(check_output_target(MPI_COMM_WORLD, p, true));
  write_results(MPI_COMM_WORLD, p, true, make_axes(), make_meta("first"), kP, my_records(Dist::Cyclic));
  barrier();
  on_rank0([&] { check_file(p, make_axes(), make_meta("first")); });
  // and an existing result file is replaced as a whole
  write_results(MPI_COMM_WORLD, p, true, make_axes(false), make_meta("second"), kP,
                my_records(Dist::UnevenReversed));
  barrier();
  on_rank0([&] {
    check_file(p, make_axes(false), make_meta("second"));
    EXPECT_TRUE(partial_files().empty());
  });
}

TEST(ResultFile, MissingDirectoryIsAClearError) {
  const std::string p = scratch("no/such/dir/out.h5");
  try {
    write_results(MPI_COMM_WORLD, p, false, make_axes(), make_meta(), kP, my_records(Dist::Cyclic));
    ADD_FAILURE() << "no exception";
  } catch (const ResultFileError& e) {
    EXPECT_NE(std::string(e.what()).find("does not exist"), std::string::npos) << e.what();
  }
  EXPECT_THROW(check_output_target(MPI_COMM_WORLD, g_dir, true), ResultFileError);  // a directory
}

TEST(ResultFile, RejectsInconsistentRecords) {
  const std::string p = scratch("bad.h5");
  auto expect_refused = [&](const std::vector<PointRecord>& mine, const std::string& needle) {
    try {
      write_results(MPI_COMM_WORLD, p, false, make_axes(), make_meta(), kP, mine);
      ADD_FAILURE() << "no exception for " << needle;
    } catch (const OutputExistsError& e) {
      ADD_FAILURE() << e.what();
    } catch (const ResultFileError& e) {
      EXPECT_NE(std::string(e.what()).find(needle), std::string::npos) << e.what();
    }
    barrier();
    on_rank0([&] {
      EXPECT_FALSE(output_exists(p));
      EXPECT_TRUE(partial_files().empty());
    });
  };
  // a point missing
  {
    auto mine = my_records(Dist::Cyclic);
    mine.erase(std::remove_if(mine.begin(), mine.end(), [](const PointRecord& r) { return r.index == 5; }),
               mine.end());
    expect_refused(mine, "point 5");
  }
  // a point passed twice (by two ranks, or twice by one rank)
  {
    auto mine = my_records(Dist::Cyclic);
    if (g_rank == g_size - 1) mine.push_back(make_record(0));
    expect_refused(mine, g_size > 1 ? "more than one rank" : "passed twice");
  }
  // a vector of the wrong length, on the last rank only
  {
    auto mine = my_records(Dist::Cyclic);
    if (g_rank == g_size - 1) mine.back().hilbert_cap.push_back(1.0);
    expect_refused(mine, "hilbert_cap");
  }
  // wrong number of parameters, an index out of range
  {
    auto mine = my_records(Dist::Cyclic);
    if (g_rank == 0) mine.front().params.pop_back();
    expect_refused(mine, "parameters");
    mine = my_records(Dist::Cyclic);
    if (g_rank == 0) mine.front().index = kP;
    expect_refused(mine, "index outside");
  }
}

// Every point failed: no exponents (K = 0), no histograms (bins = 0), no
// bound axes. Zero-width datasets are still written.
TEST(ResultFile, AllFailedAndEmptyAxes) {
  const std::string p = scratch("allfailed.h5");
  RunAxes ax = make_axes();
  ax.hist_bins = 0;
  ax.region_sizes.clear();
  std::vector<PointRecord> mine;
  for (std::int64_t i = g_rank; i < 5; i += g_size) {
    PointRecord r;
    r.index = i;
    r.params = {0, 4, i};
    r.status = static_cast<std::int32_t>(PointStatus::InvalidModel);
    r.message = "gate " + std::to_string(i) + " is not symplectic";
    mine.push_back(r);
  }
  write_results(MPI_COMM_WORLD, p, false, ax, make_meta(), 5, mine);
  barrier();
  on_rank0([&] {
    RFile rf(p);
    ASSERT_GE(rf.id, 0);
    EXPECT_EQ(shape_of(rf.id, "/chaos/exponents"), (std::vector<hsize_t>{5, 0}));
    EXPECT_EQ(shape_of(rf.id, "/chaos/histogram/counts"), (std::vector<hsize_t>{5, 0}));
    EXPECT_EQ(shape_of(rf.id, "/chaos/histogram/edges"), (std::vector<hsize_t>{5, 0}));
    EXPECT_EQ(shape_of(rf.id, "/bounds/region_size"), (std::vector<hsize_t>{0}));
    EXPECT_EQ(shape_of(rf.id, "/bounds/hilbert_cap"), (std::vector<hsize_t>{5, 0, 2}));
    EXPECT_EQ(shape_of(rf.id, "/bounds/lightcone_rate"), (std::vector<hsize_t>{5, 2}));
    for (double x : read_raw<double>(rf.id, "/chaos/lambda_max", H5T_NATIVE_DOUBLE)) EXPECT_TRUE(std::isnan(x));
    for (double x : read_raw<double>(rf.id, "/bounds/lightcone_rate", H5T_NATIVE_DOUBLE)) EXPECT_TRUE(std::isnan(x));
    for (auto c : read_raw<std::int64_t>(rf.id, "/chaos/exponent_count", H5T_NATIVE_INT64)) EXPECT_EQ(c, 0);
    for (auto c : read_raw<std::int64_t>(rf.id, "/bounds/cuts", H5T_NATIVE_INT64)) EXPECT_EQ(c, -1);
    for (auto s : read_raw<std::int32_t>(rf.id, "/points/status", H5T_NATIVE_INT32)) EXPECT_EQ(s, 1);
    h5::Dataset ds(H5Dopen2(rf.id, "/points/message", H5P_DEFAULT), H5Dclose, p, "/points/message");
    EXPECT_EQ(h5::read_fixed_strings(ds)[4], "gate 4 is not symplectic");
  });
}

TEST(ResultFile, ZeroPoints) {
  const std::string p = scratch("empty.h5");
  write_results(MPI_COMM_WORLD, p, false, make_axes(), make_meta(), 0, {});
  barrier();
  on_rank0([&] {
    RFile rf(p);
    ASSERT_GE(rf.id, 0);
    EXPECT_EQ(attr_int(rf.id, "/", "point_count"), 0);
    EXPECT_EQ(shape_of(rf.id, "/chaos/lambda_max"), std::vector<hsize_t>{0});
    EXPECT_EQ(shape_of(rf.id, "/bounds/hilbert_cap"), (std::vector<hsize_t>{0, 3, 2}));
  });
}

// Metadata comes from rank 0 even if other ranks pass something else (e.g.
// a creation time taken a second later).
TEST(ResultFile, MetadataFromRankZero) {
  const std::string p = scratch("meta.h5");
  RunMeta m = make_meta();
  if (g_rank != 0) m.created = "1999-12-31T23:59:59Z";
  write_results(MPI_COMM_WORLD, p, false, make_axes(), m, kP, my_records(Dist::Cyclic));
  barrier();
  on_rank0([&] {
    RFile rf(p);
    EXPECT_EQ(attr_string(rf.id, "/", "created"), make_meta().created);
  });
}

// ---------------------------------------------------------------- main

namespace {
// On ranks > 0 only failures are printed, prefixed with the rank.
class FailurePrinter : public ::testing::EmptyTestEventListener {
  void OnTestPartResult(const ::testing::TestPartResult& r) override {
    if (r.failed())
      std::fprintf(stderr, "[rank %d] %s:%d: %s\n", g_rank, r.file_name() ? r.file_name() : "?",
                   r.line_number(), r.summary());
  }
};
}  // namespace

int main(int argc, char** argv) {
  MPI_Init(&argc, &argv);
  MPI_Comm_rank(MPI_COMM_WORLD, &g_rank);
  MPI_Comm_size(MPI_COMM_WORLD, &g_size);
  ::testing::InitGoogleTest(&argc, argv);
  if (g_rank != 0) {
    auto& ls = ::testing::UnitTest::GetInstance()->listeners();
    delete ls.Release(ls.default_result_printer());
    ls.Append(new FailurePrinter);
  }
  {
    std::string dir;
    if (g_rank == 0) {
      const char* base = std::getenv("TMPDIR");
      std::string tmpl = std::string(base && *base ? base : "/tmp") + "/toral_test_io.XXXXXX";
      std::vector<char> buf(tmpl.begin(), tmpl.end());
      buf.push_back('\0');
      if (!mkdtemp(buf.data())) {
        std::perror("mkdtemp");
        MPI_Abort(MPI_COMM_WORLD, 2);
      }
      dir = buf.data();
    }
    int n = static_cast<int>(dir.size());
    MPI_Bcast(&n, 1, MPI_INT, 0, MPI_COMM_WORLD);
    dir.resize(static_cast<std::size_t>(n));
    MPI_Bcast(dir.data(), n, MPI_CHAR, 0, MPI_COMM_WORLD);
    g_dir = dir;
  }
  int rc = RUN_ALL_TESTS();
  int worst = 0;
  MPI_Allreduce(&rc, &worst, 1, MPI_INT, MPI_MAX, MPI_COMM_WORLD);
  barrier();
  if (g_rank == 0) {
    if (worst == 0 && !std::getenv("TORAL_TEST_KEEP")) {
      std::error_code ec;
      fs::remove_all(g_dir, ec);
    } else {
      std::fprintf(stderr, "test files kept in %s\n", g_dir.c_str());
    }
  }
  MPI_Finalize();
  return worst;
}
