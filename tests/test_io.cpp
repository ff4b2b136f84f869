// Tests of io/: the HDF5 RAII layer and the result-file layout (version 1).
// Runs with any number of MPI ranks (ctest runs it with 1 and 2). Files are
// written collectively and read back on rank 0 with the serial HDF5 C API.
#include <gtest/gtest.h>
#include <hdf5.h>
#include <mpi.h>
#include <unistd.h>

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

#include "record_expect.hpp"
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
constexpr std::int64_t kFailed = 3, kFailedLong = 7, kNoBounds = 6, kPending = 9;
// /entanglement: T = 3, two regions ({0} and {1, 2, 5}: the second does not
// fit the L = 4 points), N in {2, 3}, a profile every 2 periods, Lmax = 8.
constexpr std::int64_t kT = 3, kStride = 2, kNoEnt = 5;
const std::vector<std::int64_t> kRegionSize = {1, 3};
const std::vector<std::int64_t> kRegionSites = {0, -1, -1, 1, 2, 5};
const std::vector<std::int64_t> kStabN = {2, 3};

// The diagnostics' part of the synthetic run: a schema declared here the way
// a diagnostic declares one (driver/diagnostic.hpp), shaped like the exact
// entanglement output, and the values of each record in a plain struct.
struct Ent {
  double ent_wall_time = kNaN;
  std::vector<std::int64_t> ent_cuts;
  std::vector<double> ent_lyapunov_rate, ent_region_rate;
  std::vector<double> gauss_entropy, gauss_radius;
  std::vector<std::int64_t> gauss_failures;
  std::vector<double> gauss_slope, gauss_slope_over_lyapunov, gauss_slope_over_region_rate, gauss_saturation_value,
      gauss_saturation_time;
  std::vector<double> stab_entropy, stab_slope, stab_slope_over_lyapunov, stab_slope_over_lightcone,
      stab_saturation_value, stab_saturation_time, stab_cap, stab_lightcone_rate;
  std::vector<std::int64_t> stab_violations;
  std::vector<double> stab_profile;  // [N][k][x], x = 0..L of the point (ragged)
};

struct EntParts {
  bool gaussian = true, stabilizer = true, profile = true;
};

struct TSlot {
  FieldDecl decl;
  double Ent::*s = nullptr;
  std::vector<double> Ent::*f = nullptr;
  std::vector<std::int64_t> Ent::*i = nullptr;
};

const std::string kTp = "/entanglement/t", kRp = "/entanglement/region_size", kNp = "/entanglement/stabilizer/local_dim",
                  kKp = "/entanglement/stabilizer/profile_t", kXp = "/entanglement/stabilizer/cut";

std::vector<TSlot> tslots(EntParts e) {
  std::vector<TSlot> v;
  auto fd = [](std::string p, Elem t, std::vector<std::string> d, std::string stats = {}) {
    FieldDecl x;
    x.path = std::move(p);
    x.type = t;
    x.dims = std::move(d);
    x.units = "u(" + x.path + ")";
    x.meaning = "m(" + x.path + ")";
    x.stats = std::move(stats);
    return x;
  };
  v.push_back({fd("/entanglement/wall_time", Elem::F64, {}), &Ent::ent_wall_time});
  v.push_back({fd("/entanglement/cuts", Elem::I64, {kRp}), nullptr, nullptr, &Ent::ent_cuts});
  v.push_back({fd("/entanglement/lyapunov_rate", Elem::F64, {kRp}, "entanglement_lyapunov_rate"), nullptr, &Ent::ent_lyapunov_rate});
  v.push_back({fd("/entanglement/region_rate", Elem::F64, {kRp}), nullptr, &Ent::ent_region_rate});
  if (e.gaussian) {
    const std::string g = "/entanglement/gaussian/";
    v.push_back({fd(g + "entropy", Elem::F64, {kRp, kTp}), nullptr, &Ent::gauss_entropy});
    v.push_back({fd(g + "radius", Elem::F64, {kRp, kTp}), nullptr, &Ent::gauss_radius});
    v.push_back({fd(g + "failures", Elem::I64, {kRp}), nullptr, nullptr, &Ent::gauss_failures});
    v.push_back({fd(g + "slope", Elem::F64, {kRp}, "gaussian_slope"), nullptr, &Ent::gauss_slope});
    v.push_back({fd(g + "slope_over_lyapunov", Elem::F64, {kRp}), nullptr, &Ent::gauss_slope_over_lyapunov});
    v.push_back({fd(g + "slope_over_region_rate", Elem::F64, {kRp}), nullptr, &Ent::gauss_slope_over_region_rate});
    v.push_back({fd(g + "saturation_value", Elem::F64, {kRp}), nullptr, &Ent::gauss_saturation_value});
    v.push_back({fd(g + "saturation_time", Elem::F64, {kRp}), nullptr, &Ent::gauss_saturation_time});
  }
  if (e.stabilizer) {
    const std::string b = "/entanglement/stabilizer/";
    v.push_back({fd(b + "entropy", Elem::F64, {kNp, kRp, kTp}), nullptr, &Ent::stab_entropy});
    for (const auto& [name, m] : std::vector<std::pair<std::string, std::vector<double> Ent::*>>{
             {"slope", &Ent::stab_slope},
             {"slope_over_lyapunov", &Ent::stab_slope_over_lyapunov},
             {"slope_over_lightcone", &Ent::stab_slope_over_lightcone},
             {"saturation_value", &Ent::stab_saturation_value},
             {"saturation_time", &Ent::stab_saturation_time},
             {"cap", &Ent::stab_cap},
             {"lightcone_rate", &Ent::stab_lightcone_rate}})
      v.push_back({fd(b + name, Elem::F64, {kNp, kRp}, name == "slope" ? "stabilizer_slope" : ""), nullptr, m});
    v.push_back({fd(b + "violations", Elem::I64, {kNp, kRp}), nullptr, nullptr, &Ent::stab_violations});
    if (e.profile) {
      FieldDecl p = fd(b + "profile", Elem::F64, {kNp, kKp, kXp});
      p.ragged = {false, false, true};
      p.attrs = {AttrDecl::of("stride", kStride)};
      v.push_back({p, nullptr, &Ent::stab_profile});
    }
  }
  return v;
}

CoordDecl tcoord(std::string path, std::vector<std::string> dims, std::vector<std::int64_t> v) {
  CoordDecl c;
  c.path = std::move(path);
  c.type = Elem::I64;
  c.dims = std::move(dims);
  c.i = std::move(v);
  c.units = "u(" + c.path + ")";
  c.meaning = "m(" + c.path + ")";
  return c;
}

Schema make_schema(EntParts e = {}) {
  Schema s;
  s.groups.push_back({"/entanglement", "exact entanglement (test)", {AttrDecl::of("saturation_fraction", 0.99)}});
  if (e.gaussian) s.groups.push_back({"/entanglement/gaussian", "gaussian (test)", {}});
  if (e.stabilizer) s.groups.push_back({"/entanglement/stabilizer", "stabilizer (test)", {}});
  s.coords.push_back(tcoord(kTp, {kTp}, {0, 1, 2, 3}));
  s.coords.push_back(tcoord(kRp, {kRp}, kRegionSize));
  s.coords.push_back(tcoord("/entanglement/site_slot", {"/entanglement/site_slot"}, {0, 1, 2}));
  s.coords.push_back(tcoord("/entanglement/region_sites", {kRp, "/entanglement/site_slot"}, kRegionSites));
  if (e.stabilizer) {
    s.coords.push_back(tcoord(kNp, {kNp}, kStabN));
    if (e.profile) {
      s.coords.push_back(tcoord(kKp, {kKp}, {0, 2}));
      s.coords.push_back(tcoord(kXp, {kXp}, {0, 1, 2, 3, 4, 5, 6, 7, 8}));
    }
  }
  for (auto& t : tslots(e)) s.fields.push_back(t.decl);
  return s;
}

// The record's field values for schema `s` (from the slots of its paths).
void pack(const Ent& x, const Schema& s, PointRecord& r) {
  const std::vector<TSlot> all = tslots({});
  r.fields.clear();
  for (std::size_t k = 0; k < s.fields.size(); ++k) {
    const auto it = std::find_if(all.begin(), all.end(), [&](const TSlot& t) { return t.decl.path == s.fields[k].path; });
    FieldValue v;
    if (it->s) {
      v.f = {x.*(it->s)};
    } else {
      const std::size_t n = it->f ? (x.*(it->f)).size() : (x.*(it->i)).size();
      if (n > 0) {
        if (it->f) v.f = x.*(it->f);
        else v.i = x.*(it->i);
        v.shape = s.inner_shape(k);
        if (s.fields[k].is_ragged(2)) v.shape[2] = static_cast<std::int64_t>(n) / (v.shape[0] * v.shape[1]);
      }
    }
    r.fields.push_back(std::move(v));
  }
}

// The values of `r` back (an absent field: empty).
Ent ent(const PointRecord& r, const Schema& s = make_schema()) {
  Ent x;
  const std::vector<TSlot> all = tslots({});
  for (std::size_t k = 0; k < s.fields.size() && k < r.fields.size(); ++k) {
    const auto it = std::find_if(all.begin(), all.end(), [&](const TSlot& t) { return t.decl.path == s.fields[k].path; });
    if (it->s) x.*(it->s) = r.fields[k].f.empty() ? kNaN : r.fields[k].f[0];
    else if (it->f) x.*(it->f) = r.fields[k].f;
    else x.*(it->i) = r.fields[k].i;
  }
  return x;
}

RunAxes make_axes(bool bulk = true, bool ent = true) {
  RunAxes a;
  a.param_names = {"sweep", "sites", "seed"};
  a.param_meanings = {"index into sweep_names", "lattice size L", "disorder seed"};
  a.swept = {"sweep", "sites", "seed"};
  a.region_sizes = kEll;
  a.local_dims = kN;
  a.hist_bins = kBins;
  a.bulk_limit = bulk;
  if (ent) a.schema = make_schema();
  return a;
}

// The record without its /entanglement fields (a run without the table).
PointRecord without_entanglement(PointRecord r) {
  r.fields.clear();
  return r;
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
  if (i == kPending) {
    r.status = static_cast<std::int32_t>(PointStatus::Pending);
    return r;  // not computed yet: defaults everywhere
  }
  const double x = static_cast<double>(i);
  r.method = static_cast<std::int32_t>(1 + i % 3);
  r.wall_time = 0.1 * x + 0.01;
  r.lambda_max = 0.5 + x;
  r.ks_rate = 2.0 * x + 0.125;
  r.ks_density = r.ks_rate / 8.0;
  r.unstable_count = i;
  r.zero_count = 2 * (i % 3);
  r.zero_certified = static_cast<std::int64_t>(i % 3) - 1;
  const std::size_t n = 1 + static_cast<std::size_t>((i * 3) % 7);  // ragged: 1..7
  for (std::size_t k = 0; k < n; ++k) r.exponents.push_back(x + 0.1 * static_cast<double>(n - k));
  if (i % 3 != 0) {  // some points estimate no per-exponent errors
    for (std::size_t k = 0; k < n; ++k) r.exponent_errors.push_back(1e-13 * static_cast<double>(k + 1) + x * 1e-15);
    if (i == 4) r.exponent_errors[0] = kNaN;  // one not estimated
  }
  r.solver = static_cast<std::int32_t>(1 + i % 5);
  r.solver_converged = static_cast<std::int64_t>(n);
  r.solver_iterations = 10 + i;
  r.solver_residual = 1e-14 * (x + 1);
  r.solver_time = 0.05 * x;
  r.solver_ranks = 1 + i % 2;
  r.cluster_count = 1 + i % 3;
  r.cluster_spread = 1e-9 * x;
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
    for (std::size_t l = 0; l < kEll.size(); ++l) {
      r.cuts.push_back(l + 1 == kEll.size() ? 1 : 2);  // per ell: the last block touches an end
      r.lyapunov_rate.push_back(x + 0.01 * kEll[l]);
    }
    for (std::size_t n2 = 0; n2 < kN.size(); ++n2)
      r.ehrenfest_time.push_back(std::log(static_cast<double>(kN[n2])) / r.lambda_max);
    for (std::size_t l = 0; l < kEll.size(); ++l)
      for (std::size_t n2 = 0; n2 < kN.size(); ++n2) {
        const double cap = kEll[l] * std::log(static_cast<double>(kN[n2]));
        const double light = 2.0 * static_cast<double>(r.cuts[l]) * std::log(static_cast<double>(kN[n2])) + x;
        r.hilbert_cap.push_back(cap);
        r.lightcone_rate.push_back(light);
        r.saturation_lyapunov.push_back(cap / r.lyapunov_rate[l] + 1000.0 * l + 100.0 * n2);
        r.saturation_lightcone.push_back(cap / light + 10.0 * l + n2);
      }
  }
  if (i != kNoEnt) {  // kNoEnt: gates redrawn in time, nothing computed
    const std::int64_t L = r.params[1];
    const std::size_t nr = kRegionSize.size(), nt = kT + 1, nn = kStabN.size();
    const std::size_t nk = kT / kStride + 1, w = static_cast<std::size_t>(L) + 1;
    Ent e;
    e.ent_wall_time = 0.01 * x + 0.001;
    for (std::size_t k = 0; k < nr; ++k) {
      const bool fits = k == 0 || L >= 6;
      const double kk = static_cast<double>(k);
      e.ent_cuts.push_back(fits ? static_cast<std::int64_t>(2 + k) : -1);
      e.ent_lyapunov_rate.push_back(fits ? x + 0.5 * kk : kNaN);
      e.ent_region_rate.push_back(fits ? x + 0.25 * kk : kNaN);
      for (std::size_t t = 0; t < nt; ++t) {
        e.gauss_entropy.push_back(fits ? 0.1 * static_cast<double>(t) * (kk + 1) + x : kNaN);
        e.gauss_radius.push_back(fits ? 1e-13 * static_cast<double>(t + 1) : kNaN);
      }
      e.gauss_failures.push_back(fits ? (i == 4 && k == 0 ? 1 : 0) : -1);
      e.gauss_slope.push_back(fits ? 0.1 * (kk + 1) : kNaN);
      e.gauss_slope_over_lyapunov.push_back(fits ? 0.1 * (kk + 1) / (x + 0.5 * kk) : kNaN);
      e.gauss_slope_over_region_rate.push_back(fits ? 0.1 * (kk + 1) / (x + 0.25 * kk) : kNaN);
      e.gauss_saturation_value.push_back(fits ? 0.3 * (kk + 1) + x : kNaN);
      e.gauss_saturation_time.push_back(fits ? 3.0 : kNaN);
    }
    for (std::size_t n = 0; n < nn; ++n)
      for (std::size_t k = 0; k < nr; ++k) {
        const bool fits = k == 0 || L >= 6;
        const double lnN = std::log(static_cast<double>(kStabN[n]));
        for (std::size_t t = 0; t < nt; ++t)
          e.stab_entropy.push_back(fits ? lnN * static_cast<double>(std::min<std::size_t>(t, k + 1)) : kNaN);
        e.stab_slope.push_back(fits ? 0.0 : kNaN);
        e.stab_slope_over_lyapunov.push_back(fits ? 0.0 : kNaN);
        e.stab_slope_over_lightcone.push_back(fits ? 0.0 : kNaN);
        e.stab_saturation_value.push_back(fits ? lnN * static_cast<double>(k + 1) : kNaN);
        e.stab_saturation_time.push_back(fits ? static_cast<double>(k + 1) : kNaN);
        e.stab_cap.push_back(fits ? lnN * static_cast<double>(k + 1) : kNaN);
        e.stab_lightcone_rate.push_back(fits ? 2.0 * static_cast<double>(2 + k) * lnN : kNaN);
        e.stab_violations.push_back(fits ? 0 : -1);
      }
    for (std::size_t q = 0; q < nn * nk; ++q)
      for (std::size_t xx = 0; xx < w; ++xx) e.stab_profile.push_back(0.5 * x + static_cast<double>(q) + 0.01 * static_cast<double>(xx));
    pack(e, make_schema(), r);
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
double attr_real(hid_t f, const std::string& obj, const std::string& name) {
  h5::Object o(H5Oopen(f, obj.c_str(), H5P_DEFAULT), H5Oclose, "test", obj);
  return h5::read_attr_double(o, name);
}
// The dimension scales attached to each dimension of a dataset (absolute paths).
std::vector<std::string> scales_of(hid_t f, const std::string& path) {
  h5::Dataset d(H5Dopen2(f, path.c_str(), H5P_DEFAULT), H5Dclose, "test", path);
  return h5::scale_names(d);
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

// Expected int64 dataset of shape (P, inner...) whose row i is row(i).
void expect_i64_rows(hid_t f, const std::string& path, std::vector<hsize_t> dims,
                     const std::function<std::vector<std::int64_t>(const PointRecord&)>& row,
                     const std::vector<PointRecord>& recs) {
  ASSERT_TRUE(link_exists(f, path)) << path;
  EXPECT_EQ(shape_of(f, path), dims) << path;
  EXPECT_TRUE(type_is(f, path, H5T_STD_I64LE)) << path;
  const auto v = read_raw<std::int64_t>(f, path, H5T_NATIVE_INT64);
  std::size_t w = 1;
  for (std::size_t k = 1; k < dims.size(); ++k) w *= dims[k];
  ASSERT_EQ(v.size(), recs.size() * w) << path;
  for (std::size_t i = 0; i < recs.size(); ++i) {
    const auto want = row(recs[i]);
    ASSERT_EQ(want.size(), w) << path;
    for (std::size_t k = 0; k < w; ++k) EXPECT_EQ(v[i * w + k], want[k]) << path << " point " << i << " element " << k;
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
  auto recs = all_records(P);
  if (ax.schema.empty())
    for (auto& r : recs) r = without_entanglement(r);
  const hsize_t hP = static_cast<hsize_t>(P);
  const std::size_t nl = ax.region_sizes.size(), nn = ax.local_dims.size();

  // root attributes
  EXPECT_EQ(attr_string(f, "/", "toral_version"), meta.toral_version);
  EXPECT_EQ(attr_int(f, "/", "layout_version"), 3);
  EXPECT_EQ(attr_string(f, "/", "config"), meta.config_text);
  EXPECT_EQ(attr_string(f, "/", "config_source"), meta.config_source);
  EXPECT_EQ(attr_string(f, "/", "created"), meta.created);
  EXPECT_EQ(attr_int(f, "/", "ranks"), meta.ranks);
  EXPECT_EQ(attr_int(f, "/", "point_count"), P);
  EXPECT_EQ(attr_strings(f, "/", "sweep_names"), meta.sweep_names);
  EXPECT_EQ(attr_string(f, "/", "config_hash"),
            meta.config_hash.empty() ? config_hash_of(meta.config_text) : meta.config_hash);
  EXPECT_EQ(attr_int(f, "/", "total_points"), meta.total_points ? meta.total_points : P);
  EXPECT_EQ(attr_string(f, "/", "shard"), meta.shard);

  // /points
  EXPECT_EQ(attr_strings(f, "/points", "swept"), ax.swept);
  EXPECT_EQ(attr_strings(f, "/points", "parameters"), ax.param_names);
  EXPECT_EQ(attr_int(f, "/points", "absent"), std::numeric_limits<std::int64_t>::min());
  for (std::size_t p = 0; p < ax.param_names.size(); ++p) {
    const std::string path = "/points/" + ax.param_names[p];
    expect_i64(f, path, [p](const PointRecord& r) { return r.params[p]; }, recs);
    EXPECT_EQ(attr_string(f, path, "meaning"), ax.param_meanings[p]);
  }
  expect_i64(f, "/points/index", [](const PointRecord& r) { return r.index; }, recs);
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
            (std::vector<std::string>{"none", "bloch", "dense", "krylov", "tangent"}));
  EXPECT_EQ(attr_strings(f, "/points/status", "labels")[0], "ok");
  EXPECT_EQ(attr_strings(f, "/points/status", "labels").size(), 9u);
  EXPECT_EQ(attr_strings(f, "/points/status", "labels")[6], "pending");
  EXPECT_EQ(attr_strings(f, "/points/status", "labels")[7], "diagnostic_failed");
  EXPECT_EQ(attr_strings(f, "/points/status", "labels")[8], "inaccurate");
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
  expect_i64(f, "/chaos/zero_count", [](const PointRecord& r) { return r.zero_count; }, recs);
  expect_i64(f, "/chaos/zero_certified", [](const PointRecord& r) { return r.zero_certified; }, recs);
  expect_f64(f, "/chaos/exponents", {hP, K}, [K](const PointRecord& r) { return pad(r.exponents, K); }, recs);
  expect_i64(f, "/chaos/exponent_count",
             [](const PointRecord& r) { return static_cast<std::int64_t>(r.exponents.size()); }, recs);
  expect_f64(f, "/chaos/exponent_error", {hP, K}, [K](const PointRecord& r) { return pad(r.exponent_errors, K); }, recs);
  {
    ASSERT_TRUE(link_exists(f, "/chaos/solver/method"));
    EXPECT_EQ(shape_of(f, "/chaos/solver/method"), std::vector<hsize_t>{hP});
    EXPECT_TRUE(type_is(f, "/chaos/solver/method", H5T_STD_I32LE));
    const auto sv = read_raw<std::int32_t>(f, "/chaos/solver/method", H5T_NATIVE_INT32);
    ASSERT_EQ(sv.size(), hP);
    for (std::size_t i = 0; i < hP; ++i) EXPECT_EQ(sv[i], recs[i].solver) << i;
    EXPECT_EQ(attr_strings(f, "/chaos/solver/method", "labels"),
              (std::vector<std::string>{"none", "lapack", "bloch_exact", "krylov_schur", "shift_invert", "tangent"}));
  }
  expect_i64(f, "/chaos/solver/converged", [](const PointRecord& r) { return r.solver_converged; }, recs);
  expect_i64(f, "/chaos/solver/iterations", [](const PointRecord& r) { return r.solver_iterations; }, recs);
  expect_f64(f, "/chaos/solver/residual", {hP}, [](const PointRecord& r) { return std::vector{r.solver_residual}; }, recs);
  expect_f64(f, "/chaos/solver/wall_time", {hP}, [](const PointRecord& r) { return std::vector{r.solver_time}; }, recs);
  expect_i64(f, "/chaos/solver/ranks", [](const PointRecord& r) { return r.solver_ranks; }, recs);
  expect_i64(f, "/chaos/solver/cluster_count", [](const PointRecord& r) { return r.cluster_count; }, recs);
  expect_f64(f, "/chaos/solver/cluster_spread", {hP}, [](const PointRecord& r) { return std::vector{r.cluster_spread}; }, recs);
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
  expect_i64_rows(f, "/bounds/cuts", {hP, nl}, [nl](const PointRecord& r) {
    std::vector<std::int64_t> o(nl, -1);
    std::copy_n(r.cuts.begin(), std::min(nl, r.cuts.size()), o.begin());
    return o;
  }, recs);
  expect_f64(f, "/bounds/lyapunov_rate", {hP, nl}, [nl](const PointRecord& r) { return pad(r.lyapunov_rate, nl); }, recs);
  expect_f64(f, "/bounds/hilbert_cap", {hP, nl, nn}, [nl, nn](const PointRecord& r) { return pad(r.hilbert_cap, nl * nn); }, recs);
  expect_f64(f, "/bounds/lightcone_rate", {hP, nl, nn}, [nl, nn](const PointRecord& r) { return pad(r.lightcone_rate, nl * nn); }, recs);
  expect_f64(f, "/bounds/ehrenfest_time", {hP, nn}, [nn](const PointRecord& r) { return pad(r.ehrenfest_time, nn); }, recs);
  expect_f64(f, "/bounds/saturation_lyapunov", {hP, nl, nn}, [nl, nn](const PointRecord& r) { return pad(r.saturation_lyapunov, nl * nn); }, recs);
  expect_f64(f, "/bounds/saturation_lightcone", {hP, nl, nn}, [nl, nn](const PointRecord& r) { return pad(r.saturation_lightcone, nl * nn); }, recs);

  // Named dimensions of the core datasets (dimension scales).
  EXPECT_EQ(scales_of(f, "/chaos/exponents"), (std::vector<std::string>{"/point", "/chaos/exponent"}));
  EXPECT_EQ(scales_of(f, "/chaos/histogram/edges"), (std::vector<std::string>{"/point", "/chaos/histogram/edge"}));
  EXPECT_EQ(scales_of(f, "/bounds/hilbert_cap"),
            (std::vector<std::string>{"/point", "/bounds/region_size", "/bounds/local_dim"}));
  EXPECT_EQ(scales_of(f, "/bounds/ehrenfest_time"), (std::vector<std::string>{"/point", "/bounds/local_dim"}));
  EXPECT_EQ(scales_of(f, "/points/message"), (std::vector<std::string>{"/point"}));
  EXPECT_EQ(scales_of(f, "/chaos/solver/ranks"), (std::vector<std::string>{"/point"}));
  {
    std::vector<std::int64_t> idx;
    for (const auto& r : recs) idx.push_back(r.index);
    EXPECT_EQ(read_raw<std::int64_t>(f, "/point", H5T_NATIVE_INT64), idx);
  }

  // The diagnostics' datasets: what the test schema declares, each row the
  // record's value padded (NaN / -1), a ragged dim padded past its extent.
  const Schema& sc = ax.schema;
  EXPECT_EQ(link_exists(f, "/entanglement"), !sc.empty());
  std::size_t ent_count = 0;
  {
    h5::Object root(H5Oopen(f, "/", H5P_DEFAULT), H5Oclose, path, "/");
    EXPECT_EQ(h5::read_attr_string(root, "schema"), sc.text());
    EXPECT_EQ(h5::read_attr_string(root, "schema_hash"), sc.hash());
  }
  if (!sc.empty()) {
    EXPECT_EQ(read_raw<std::int64_t>(f, "/entanglement/t", H5T_NATIVE_INT64), (std::vector<std::int64_t>{0, 1, 2, 3}));
    EXPECT_EQ(read_raw<std::int64_t>(f, "/entanglement/region_size", H5T_NATIVE_INT64), kRegionSize);
    EXPECT_EQ(shape_of(f, "/entanglement/region_sites"), (std::vector<hsize_t>{2, 3}));
    EXPECT_EQ(read_raw<std::int64_t>(f, "/entanglement/region_sites", H5T_NATIVE_INT64), kRegionSites);
    EXPECT_TRUE(type_is(f, "/entanglement/region_sites", H5T_STD_I64LE));
    EXPECT_EQ(attr_real(f, "/entanglement", "saturation_fraction"), 0.99);
    const bool stab = link_exists(f, "/entanglement/stabilizer");
    if (stab) EXPECT_EQ(read_raw<std::int64_t>(f, "/entanglement/stabilizer/local_dim", H5T_NATIVE_INT64), kStabN);
    if (sc.field_index("/entanglement/stabilizer/profile") >= 0) {
      EXPECT_EQ(read_raw<std::int64_t>(f, "/entanglement/stabilizer/profile_t", H5T_NATIVE_INT64),
                (std::vector<std::int64_t>{0, 2}));
      EXPECT_EQ(attr_int(f, "/entanglement/stabilizer/profile", "stride"), kStride);
      // The ragged last axis: a point of L sites fills x = 0..L, NaN beyond.
      const auto v = read_raw<double>(f, "/entanglement/stabilizer/profile", H5T_NATIVE_DOUBLE);
      ASSERT_EQ(v.size(), static_cast<std::size_t>(P) * 2 * 2 * 9);
      for (std::int64_t i = 0; i < P; ++i) {
        if (recs[static_cast<std::size_t>(i)].fields.empty()) continue;
        const std::size_t L = static_cast<std::size_t>(recs[static_cast<std::size_t>(i)].params[1]);
        const double* row = v.data() + static_cast<std::size_t>(i) * 36;
        EXPECT_EQ(row[L], ent(recs[static_cast<std::size_t>(i)]).stab_profile[L]) << i;
        for (std::size_t x = L + 1; x < 9; ++x) EXPECT_TRUE(std::isnan(row[x])) << i << " x " << x;
      }
    }
    expect_f64(f, "/entanglement/wall_time", {hP}, [&](const PointRecord& r) { return std::vector{ent(r, sc).ent_wall_time}; }, recs);
    for (std::size_t k = 0; k < sc.fields.size(); ++k) {
      const FieldDecl& fd = sc.fields[k];
      std::vector<hsize_t> shape{hP};
      for (auto x : sc.inner_shape(k)) shape.push_back(static_cast<hsize_t>(x));
      auto row = [&, k](const PointRecord& r) {
        std::vector<double> of;
        std::vector<std::int64_t> oi;
        static const FieldValue none;
        pad_value(sc, k, k < r.fields.size() ? r.fields[k] : none, of, oi);
        return std::make_pair(of, oi);
      };
      if (fd.type == Elem::F64)
        expect_f64(f, fd.path, shape, [&](const PointRecord& r) { return row(r).first; }, recs);
      else
        expect_i64_rows(f, fd.path, shape, [&](const PointRecord& r) { return row(r).second; }, recs);
      // named dimensions: the point axis, then the declared axes
      std::vector<std::string> want{"/point"};
      want.insert(want.end(), fd.dims.begin(), fd.dims.end());
      EXPECT_EQ(scales_of(f, fd.path), want) << fd.path;
    }
    ent_count = sc.coords.size() + sc.fields.size();
  }

  // units and meaning on every dataset; the documented units pinned
  const std::map<std::string, std::string> units = {
      {"/points/wall_time", "s"},
      {"/points/index", "1"},
      {"/chaos/exponent_error", "1/period"},
      {"/chaos/solver/method", ""},
      {"/chaos/solver/residual", "1"},
      {"/chaos/solver/wall_time", "s"},
      {"/chaos/solver/cluster_spread", "1/period"},
      {"/chaos/lambda_max", "1/period"},
      {"/chaos/ks_rate", "nats/period"},
      {"/chaos/ks_density", "nats/(period*site)"},
      {"/chaos/zero_count", "1"},
      {"/chaos/zero_certified", "1"},
      {"/chaos/exponents", "1/period"},
      {"/chaos/histogram/counts", "1"},
      {"/chaos/histogram/edges", "1/period"},
      {"/bounds/region_size", "sites"},
      {"/bounds/cuts", "1"},
      {"/bounds/lyapunov_rate", "nats/period"},
      {"/bounds/hilbert_cap", "nats"},
      {"/bounds/lightcone_rate", "nats/period"},
      {"/bounds/ehrenfest_time", "periods"},
      {"/bounds/saturation_lyapunov", "periods"},
      {"/bounds/saturation_lightcone", "periods"},
  };
  const auto all = datasets_of(f);
  // /points: params + index, status, message, method, wall_time; /chaos: 14
  // + 8 in /chaos/solver; /limit: 5; /bounds: 9
  // + the axes: /point, /chaos/exponent, bin and edge of each histogram
  const std::size_t expected_count =
      ax.param_names.size() + 5 + 14 + 8 + (ax.bulk_limit ? 5 : 0) + 9 + ent_count + 4 + (ax.bulk_limit ? 2 : 0);
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

// ---------------------------------------------------------------- schema (io/schema.hpp)

TEST(Schema, TextRoundTripAndHash) {
  Schema s = make_schema();
  s.fields[0].attrs.push_back(AttrDecl::of("note", std::string("tab\there, newline\nthere, back\\slash")));
  s.fields[0].attrs.push_back(AttrDecl::of("x", 0.1));
  s.coords.push_back(tcoord("/entanglement/empty_name_units", {"/entanglement/empty_name_units"}, {}));
  s.coords.back().units = "";
  const std::string t = s.text();
  const Schema back = Schema::parse(t);
  EXPECT_TRUE(back == s);
  EXPECT_EQ(back.text(), t);
  // the hash is FNV-1a-64 of the text (io/common.hpp), 16 hex digits
  EXPECT_EQ(s.hash(), config_hash_of(t));
  EXPECT_EQ(s.hash().size(), 16u);
  EXPECT_EQ(Schema{}.hash(), "");
  Schema other = make_schema();
  other.fields[1].units = "something else";
  EXPECT_NE(other.hash(), make_schema().hash());
  for (const std::string& bad : std::vector<std::string>{"nonsense\n", t.substr(0, t.size() - 1), "toral-schema\t2\n",
                                t + "coord\t/x\t7\n"}) {
    EXPECT_THROW(Schema::parse(bad), std::runtime_error) << bad;
  }
}

TEST(Schema, ValidateSaysWhatIsWrong) {
  EXPECT_EQ(make_schema().validate(), "");
  auto err = [](const Schema& s) { return s.validate(); };
  {
    Schema s = make_schema();
    s.fields.push_back(s.fields[0]);
    EXPECT_NE(err(s).find("declared twice"), std::string::npos) << err(s);
  }
  {
    Schema s = make_schema();
    s.fields[1].dims = {"/entanglement/nowhere"};
    EXPECT_NE(err(s).find("not declared before it"), std::string::npos) << err(s);
  }
  {
    // an axis in a sibling group is invisible to netCDF readers
    Schema s = make_schema();
    s.fields[1].dims = {kNp};  // /entanglement/stabilizer/local_dim used from /entanglement
    EXPECT_NE(err(s).find("not in its group or an ancestor"), std::string::npos) << err(s);
  }
  {
    Schema s = make_schema();
    s.fields[1].ragged = {true, false};
    EXPECT_NE(err(s).find("ragged flags"), std::string::npos) << err(s);
  }
  {
    Schema s = make_schema();
    s.fields[1].stats = "cuts";  // an int64 field
    EXPECT_NE(err(s).find("not float64"), std::string::npos) << err(s);
  }
  {
    Schema s = make_schema();
    s.coords[3].i.pop_back();  // region_sites: 5 values for 2 x 3
    EXPECT_NE(err(s).find("holds 5 values for 6"), std::string::npos) << err(s);
  }
  {
    Schema s = make_schema();
    s.fields[0].path = "/elsewhere/x";
    EXPECT_NE(err(s).find("not in a declared group"), std::string::npos) << err(s);
  }
}

TEST(Schema, PaddingAndRaggedDims) {
  const Schema s = make_schema();
  const std::size_t prof = static_cast<std::size_t>(s.field_index("/entanglement/stabilizer/profile"));
  ASSERT_EQ(s.inner_shape(prof), (std::vector<std::int64_t>{2, 2, 9}));
  FieldValue v;
  v.shape = {2, 2, 5};  // a point of L = 4: x = 0..4
  for (int i = 0; i < 20; ++i) v.f.push_back(i);
  EXPECT_EQ(check_value(s, prof, v), "");
  std::vector<double> f;
  std::vector<std::int64_t> i;
  pad_value(s, prof, v, f, i);
  ASSERT_EQ(f.size(), 36u);
  EXPECT_EQ(f[9], 5.0);  // row (0, 1) starts at 9
  EXPECT_EQ(f[4], 4.0);
  EXPECT_TRUE(std::isnan(f[5]) && std::isnan(f[8]));
  EXPECT_TRUE(unpad_row(s, prof, f.data(), nullptr) == v);
  // a value with a zero extent is accepted and is all padding
  FieldValue z;
  z.shape = {2, 2, 0};
  EXPECT_EQ(check_value(s, prof, z), "");
  pad_value(s, prof, z, f, i);
  EXPECT_TRUE(std::all_of(f.begin(), f.end(), [](double x) { return std::isnan(x); }));
  EXPECT_TRUE(unpad_row(s, prof, f.data(), nullptr).empty());
  // a non-ragged dim must be full; data must fill the shape
  FieldValue bad = v;
  bad.shape = {1, 2, 5};
  bad.f.resize(10);
  EXPECT_NE(check_value(s, prof, bad).find("extent 1 of dim " + kNp), std::string::npos);
  bad = v;
  bad.f.pop_back();
  EXPECT_NE(check_value(s, prof, bad).find("19 values for shape of 20"), std::string::npos);
  FieldValue shape_only;
  shape_only.shape = {2, 2, 3};
  EXPECT_NE(check_value(s, prof, shape_only).find("a shape without values"), std::string::npos);
  // int64 padding is -1
  const std::size_t cuts = static_cast<std::size_t>(s.field_index("/entanglement/cuts"));
  FieldValue c;
  c.shape = {2};
  c.i = {3, -1};
  pad_value(s, cuts, c, f, i);
  EXPECT_EQ(i, (std::vector<std::int64_t>{3, -1}));
  EXPECT_TRUE(unpad_row(s, cuts, nullptr, i.data()) == c);
}

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

// write_results must refuse (a ResultFileError naming `needle`) and leave
// neither the output nor a temporary behind.
void expect_write_refused(const std::string& p, const RunMeta& m, std::int64_t rows,
                          const std::vector<PointRecord>& mine, const std::string& needle) {
  try {
    write_results(MPI_COMM_WORLD, p, false, make_axes(), m, rows, mine);
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
}

TEST(ResultFile, RejectsInconsistentRecords) {
  const std::string p = scratch("bad.h5");
  auto expect_refused = [&](const std::vector<PointRecord>& mine, const std::string& needle) {
    expect_write_refused(p, make_meta(), kP, mine, needle);
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
  // diagnostic values of the wrong length or element type, a ragged extent
  // wider than its axis, a shape that breaks a non-ragged dim
  {
    const Schema sc = make_schema();
    auto at = [&](const char* path) { return static_cast<std::size_t>(sc.field_index(path)); };
    // the first and the last of a rank's records that hold diagnostic values
    auto first = [](std::vector<PointRecord>& v) -> PointRecord& {
      return *std::find_if(v.begin(), v.end(), [](const PointRecord& r) { return !r.fields.empty(); });
    };
    auto last = [](std::vector<PointRecord>& v) -> PointRecord& {
      return *std::find_if(v.rbegin(), v.rend(), [](const PointRecord& r) { return !r.fields.empty(); });
    };
    auto mine = my_records(Dist::Cyclic);
    if (g_rank == g_size - 1) last(mine).fields[at("/entanglement/stabilizer/violations")].i.push_back(0);
    expect_refused(mine, "/entanglement/stabilizer/violations: 5 values for shape of 4");
    mine = my_records(Dist::Cyclic);
    if (g_rank == 0) first(mine).fields[at("/entanglement/gaussian/entropy")].f.pop_back();
    expect_refused(mine, "/entanglement/gaussian/entropy");
    mine = my_records(Dist::Cyclic);
    if (g_rank == 0) {
      FieldValue& v = first(mine).fields[at("/entanglement/stabilizer/profile")];
      v.shape = {2, 2, 10};  // 10 > the cut axis (Lmax + 1 = 9)
      v.f.assign(2 * 2 * 10, 0.0);
    }
    expect_refused(mine, "extent 10 of dim /entanglement/stabilizer/cut");
    mine = my_records(Dist::Cyclic);
    if (g_rank == 0) {
      FieldValue& v = first(mine).fields[at("/entanglement/gaussian/radius")];
      v.shape = {1, 4};  // the region axis is not ragged
      v.f.resize(4);
    }
    expect_refused(mine, "extent 1 of dim /entanglement/region_size");
    mine = my_records(Dist::Cyclic);
    if (g_rank == 0) {
      FieldValue& v = first(mine).fields[at("/entanglement/cuts")];
      v.f.assign(v.i.size(), 1.0);
      v.i.clear();
    }
    expect_refused(mine, "wrong element type");
    mine = my_records(Dist::Cyclic);
    if (g_rank == 0) first(mine).fields.pop_back();
    expect_refused(mine, "declared fields");
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
    EXPECT_EQ(shape_of(rf.id, "/bounds/lightcone_rate"), (std::vector<hsize_t>{5, 0, 2}));
    EXPECT_EQ(shape_of(rf.id, "/bounds/cuts"), (std::vector<hsize_t>{5, 0}));
    EXPECT_EQ(shape_of(rf.id, "/entanglement/gaussian/entropy"), (std::vector<hsize_t>{5, 2, 4}));
    EXPECT_EQ(shape_of(rf.id, "/entanglement/stabilizer/profile"), (std::vector<hsize_t>{5, 2, 2, 9}));
    for (double x : read_raw<double>(rf.id, "/entanglement/stabilizer/entropy", H5T_NATIVE_DOUBLE)) EXPECT_TRUE(std::isnan(x));
    for (auto c : read_raw<std::int64_t>(rf.id, "/entanglement/stabilizer/violations", H5T_NATIVE_INT64)) EXPECT_EQ(c, -1);
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
    EXPECT_EQ(shape_of(rf.id, "/entanglement/stabilizer/entropy"), (std::vector<hsize_t>{0, 2, 2, 4}));
    EXPECT_EQ(shape_of(rf.id, "/entanglement/stabilizer/profile"), (std::vector<hsize_t>{0, 2, 2, 9}));
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

// ---------------------------------------------------------------- shards, stats, read-back

namespace {

using toral_test::bits;

// What read_results gives back for record `r` stored in row `row`.
PointRecord canonical(PointRecord r, std::int64_t row, const Schema& sc = make_schema()) {
  r.row = row;
  r.message = h5::truncate_utf8(r.message, kMessageBytes - 1);
  auto canon = [](std::vector<double>& v) {
    if (std::all_of(v.begin(), v.end(), [](double x) { return std::isnan(x); })) v.clear();
  };
  for (auto* v : {&r.exponent_errors, &r.hist_counts, &r.hist_edges, &r.limit_hist_counts,
                  &r.limit_hist_edges, &r.lyapunov_rate, &r.hilbert_cap, &r.lightcone_rate,
                  &r.ehrenfest_time, &r.saturation_lyapunov, &r.saturation_lightcone})
    canon(*v);
  if (std::all_of(r.cuts.begin(), r.cuts.end(), [](std::int64_t x) { return x == -1; })) r.cuts.clear();
  // A field value reads back as its padded row does (io/schema.hpp unpad_row).
  if (!r.fields.empty()) {
    for (std::size_t k = 0; k < r.fields.size(); ++k) {
      std::vector<double> f;
      std::vector<std::int64_t> i;
      pad_value(sc, k, r.fields[k], f, i);
      r.fields[k] = unpad_row(sc, k, f.data(), i.data());
    }
    if (std::all_of(r.fields.begin(), r.fields.end(), [](const FieldValue& v) { return v.empty(); })) r.fields.clear();
  }
  return r;
}

void expect_same_axes(const RunAxes& a, const RunAxes& b) {
  EXPECT_EQ(a.param_names, b.param_names);
  EXPECT_EQ(a.param_meanings, b.param_meanings);
  EXPECT_EQ(a.swept, b.swept);
  EXPECT_EQ(a.region_sizes, b.region_sizes);
  EXPECT_EQ(a.local_dims, b.local_dims);
  EXPECT_EQ(a.hist_bins, b.hist_bins);
  EXPECT_EQ(a.bulk_limit, b.bulk_limit);
  EXPECT_EQ(a.schema.text(), b.schema.text());
  EXPECT_TRUE(a.schema == b.schema);
}

void expect_same_meta(const RunMeta& a, const RunMeta& b) {
  EXPECT_EQ(a.toral_version, b.toral_version);
  EXPECT_EQ(a.config_text, b.config_text);
  EXPECT_EQ(a.config_source, b.config_source);
  EXPECT_EQ(a.created, b.created);
  EXPECT_EQ(a.ranks, b.ranks);
  EXPECT_EQ(a.sweep_names, b.sweep_names);
  EXPECT_EQ(a.config_hash, b.config_hash);
  EXPECT_EQ(a.total_points, b.total_points);
  EXPECT_EQ(a.shard, b.shard);
}

// The points of the shard, in row order (deliberately not sorted).
const std::vector<std::int64_t> kShard = {10, 2, 7, 4, 0, 9, 3};

// This rank's records of the shard: row j holds point kShard[j]; rows dealt
// cyclically, each share reversed.
std::vector<PointRecord> my_shard_records() {
  std::vector<PointRecord> v;
  for (std::size_t j = 0; j < kShard.size(); ++j)
    if (static_cast<int>(j % static_cast<std::size_t>(g_size)) == g_rank) {
      PointRecord r = make_record(kShard[j]);
      r.row = static_cast<std::int64_t>(j);
      v.push_back(r);
    }
  std::reverse(v.begin(), v.end());
  return v;
}

RunMeta shard_meta() {
  RunMeta m = make_meta("shard");
  m.total_points = kP;
  m.shard = "2/3";
  return m;  // config_hash left empty: the writer fills it in
}

// Stats of 3 groups over (sweep, sites) with vector columns of every shape.
EnsembleStats make_stats() {
  EnsembleStats st;
  st.param_names = {"sweep", "sites"};
  st.params = {0, 4, 1, 6, 0, 8};
  st.count = {3, 1, 0};
  auto column = [&](const std::string& name, std::vector<std::uint64_t> inner, const std::string& units) {
    StatsColumn c;
    c.name = name;
    c.inner = inner;
    c.units = units;
    c.meaning = "statistics of " + name;
    std::size_t w = 1;
    for (auto x : inner) w *= x;
    for (std::size_t g = 0; g < st.count.size(); ++g)
      for (std::size_t k = 0; k < w; ++k) {
        const double base = 100.0 * static_cast<double>(g) + static_cast<double>(k) + 0.125 * name.size();
        const bool none = st.count[g] == 0, one = st.count[g] < 2;
        c.mean.push_back(none ? kNaN : base);
        c.std.push_back(one ? kNaN : 0.5 + static_cast<double>(k));
        c.sem.push_back(one ? kNaN : (0.5 + static_cast<double>(k)) / std::sqrt(static_cast<double>(st.count[g])));
        c.median.push_back(none ? kNaN : base - 0.25);
      }
    st.columns.push_back(c);
  };
  column("lambda_max", {}, "1/period");
  column("lyapunov_rate", {kEll.size()}, "nats/period");
  column("hilbert_cap", {kEll.size(), kN.size()}, "nats");
  column("ehrenfest_time", {kN.size()}, "periods");
  return st;
}

// Runs `f` with stderr redirected to a file; returns what was printed.
std::string stderr_of(const std::function<void()>& f) {
  const std::string p = scratch("stderr.txt");
  std::fflush(stderr);
  const int saved = dup(2);
  FILE* tmp = std::fopen(p.c_str(), "w");
  dup2(fileno(tmp), 2);
  try {
    f();
  } catch (...) {
    std::fflush(stderr);
    dup2(saved, 2);
    close(saved);
    std::fclose(tmp);
    throw;
  }
  std::fflush(stderr);
  dup2(saved, 2);
  close(saved);
  std::fclose(tmp);
  return slurp(p);
}

// read_results(path) must throw ResultFileError with a one-line message
// naming the file and containing `needle`, and HDF5 must print nothing.
void expect_read_error(const std::string& path, const std::string& needle) {
  std::string msg;
  const std::string printed = stderr_of([&] {
    try {
      read_results(path);
      ADD_FAILURE() << "read_results(" << path << ") did not throw (" << needle << ")";
    } catch (const ResultFileError& e) {
      msg = e.what();
    }
  });
  EXPECT_NE(msg.find(path), std::string::npos) << msg;
  EXPECT_NE(msg.find(needle), std::string::npos) << msg;
  EXPECT_EQ(msg.find('\n'), std::string::npos) << msg;
  EXPECT_TRUE(printed.empty()) << "printed to stderr:\n" << printed;
}

// Serial edits of a copy of a result file.
struct EditFile {
  hid_t id;
  explicit EditFile(const std::string& p) : id(H5Fopen(p.c_str(), H5F_ACC_RDWR, H5P_DEFAULT)) {}
  ~EditFile() {
    if (id >= 0) H5Fclose(id);
  }
};

}  // namespace

TEST(ResultFile, ShardSubsetHasGlobalIndices) {
  const std::string p = scratch("shard.h5");
  const std::int64_t rows = static_cast<std::int64_t>(kShard.size());
  write_results(MPI_COMM_WORLD, p, false, make_axes(), shard_meta(), rows, my_shard_records());
  barrier();
  on_rank0([&] {
    {
      RFile rf(p);
      ASSERT_GE(rf.id, 0);
      EXPECT_EQ(attr_int(rf.id, "/", "point_count"), rows);
      EXPECT_EQ(attr_int(rf.id, "/", "total_points"), kP);
      EXPECT_EQ(attr_string(rf.id, "/", "shard"), "2/3");
      EXPECT_EQ(attr_string(rf.id, "/", "config_hash"), config_hash_of(shard_meta().config_text));
      EXPECT_EQ(attr_string(rf.id, "/", "config_hash").size(), 16u);
      EXPECT_TRUE(type_is(rf.id, "/points/index", H5T_STD_I64LE));
      EXPECT_EQ(read_raw<std::int64_t>(rf.id, "/points/index", H5T_NATIVE_INT64), kShard);
      const auto sites = read_raw<std::int64_t>(rf.id, "/points/sites", H5T_NATIVE_INT64);
      const auto lam = read_raw<double>(rf.id, "/chaos/lambda_max", H5T_NATIVE_DOUBLE);
      ASSERT_EQ(sites.size(), kShard.size());
      for (std::size_t j = 0; j < kShard.size(); ++j) {
        EXPECT_EQ(sites[j], make_record(kShard[j]).params[1]) << j;
        EXPECT_TRUE(same(lam[j], make_record(kShard[j]).lambda_max)) << j;
      }
      EXPECT_EQ(shape_of(rf.id, "/chaos/exponent_error"), (std::vector<hsize_t>{kShard.size(), 7}));
    }
    const ResultData d = read_results(p);
    EXPECT_EQ(d.rows, rows);
    RunMeta want = shard_meta();
    want.config_hash = config_hash_of(want.config_text);
    expect_same_meta(d.meta, want);
    expect_same_axes(d.axes, make_axes());
    ASSERT_EQ(d.records.size(), kShard.size());
    for (std::size_t j = 0; j < kShard.size(); ++j)
      toral_test::expect_identical_records(d.records[j], canonical(make_record(kShard[j]), static_cast<std::int64_t>(j)),
                         "row " + std::to_string(j));
    EXPECT_EQ(d.stats.groups(), 0);
  });
}

TEST(ResultFile, ReadResultsRoundTrip) {
  for (const bool bulk : {true, false}) {
    const std::string p = scratch(bulk ? "roundtrip.h5" : "roundtrip_nolimit.h5");
    RunMeta m = make_meta("round trip");
    m.config_hash = "0123456789abcdef";
    write_results(MPI_COMM_WORLD, p, false, make_axes(bulk), m, kP, my_records(Dist::UnevenReversed));
    barrier();
    on_rank0([&] {
      const ResultData d = read_results(p);
      EXPECT_EQ(d.rows, kP);
      RunMeta want = m;
      want.total_points = kP;  // the default
      expect_same_meta(d.meta, want);
      expect_same_axes(d.axes, make_axes(bulk));
      ASSERT_EQ(d.records.size(), static_cast<std::size_t>(kP));
      for (std::int64_t i = 0; i < kP; ++i) {
        PointRecord r = make_record(i);
        if (!bulk) {  // no /limit: the limit fields are not stored
          r.limit_lambda_max = r.limit_ks_density = r.limit_accuracy = kNaN;
          r.limit_hist_counts.clear();
          r.limit_hist_edges.clear();
        }
        toral_test::expect_identical_records(d.records[static_cast<std::size_t>(i)], canonical(r, i), "point " + std::to_string(i));
      }
      // the long message comes back truncated, the partly-NaN errors whole
      EXPECT_EQ(d.records[kFailedLong].message.size(), 254u);
      EXPECT_EQ(d.records[4].exponent_errors.size(), d.records[4].exponents.size());
      EXPECT_TRUE(std::isnan(d.records[4].exponent_errors[0]));
      EXPECT_TRUE(d.records[3].exponent_errors.empty());
      EXPECT_EQ(d.records[kPending].status, static_cast<std::int32_t>(PointStatus::Pending));
    });
  }
  // no points, empty axes
  const std::string e = scratch("roundtrip_empty.h5");
  RunAxes ax = make_axes();
  ax.region_sizes.clear();
  ax.hist_bins = 0;
  write_results(MPI_COMM_WORLD, e, false, ax, make_meta(), 0, {});
  barrier();
  on_rank0([&] {
    const ResultData d = read_results(e);
    EXPECT_EQ(d.rows, 0);
    EXPECT_TRUE(d.records.empty());
    expect_same_axes(d.axes, ax);
  });
}

// A run without [entanglement]: no /entanglement group, and records carrying
// entanglement fields are refused; with only some parts (no gaussian, no
// profile) only those groups are written, and read back.
TEST(ResultFile, EntanglementGroupOnlyWhenConfigured) {
  const std::string p = scratch("noent.h5");
  auto stripped = my_records(Dist::Cyclic);
  for (auto& r : stripped) r = without_entanglement(r);
  write_results(MPI_COMM_WORLD, p, false, make_axes(true, false), make_meta(), kP, stripped);
  barrier();
  on_rank0([&] {
    check_file(p, make_axes(true, false), make_meta());
    const ResultData d = read_results(p);
    EXPECT_TRUE(d.axes.schema.empty());
    for (const auto& r : d.records) EXPECT_TRUE(r.fields.empty());
  });
  try {
    write_results(MPI_COMM_WORLD, scratch("noent_bad.h5"), false, make_axes(true, false), make_meta(), kP,
                  my_records(Dist::Cyclic));
    ADD_FAILURE() << "records with diagnostic values accepted without a schema";
  } catch (const ResultFileError& e) {
    EXPECT_NE(std::string(e.what()).find("declared fields"), std::string::npos) << e.what();
  }
  barrier();
  // stabilizer only, no profile: the schema of that part alone
  const Schema part_schema = make_schema({false, true, false});
  RunAxes ax = make_axes();
  ax.schema = part_schema;
  auto part = my_records(Dist::Cyclic);
  for (auto& r : part)
    if (!r.fields.empty()) pack(ent(r), part_schema, r);
  const std::string q = scratch("stab_only.h5");
  write_results(MPI_COMM_WORLD, q, false, ax, make_meta(), kP, part);
  barrier();
  on_rank0([&] {
    {
      RFile rf(q);
      EXPECT_TRUE(link_exists(rf.id, "/entanglement/stabilizer/entropy"));
      EXPECT_FALSE(link_exists(rf.id, "/entanglement/gaussian"));
      EXPECT_FALSE(link_exists(rf.id, "/entanglement/stabilizer/profile"));
      EXPECT_FALSE(link_exists(rf.id, "/entanglement/stabilizer/cut"));
    }
    const ResultData d = read_results(q);
    expect_same_axes(d.axes, ax);
    for (std::int64_t i = 0; i < kP; ++i) {
      PointRecord r = make_record(i);
      if (!r.fields.empty()) pack(ent(r), part_schema, r);
      toral_test::expect_identical_records(d.records[static_cast<std::size_t>(i)], canonical(r, i, part_schema),
                                           "point " + std::to_string(i));
    }
  });
}

TEST(ResultFile, RejectsBadRowsAndIndices) {
  const std::string p = scratch("badrows.h5");
  auto expect_refused = [&](const RunMeta& m, std::int64_t rows, const std::vector<PointRecord>& mine,
                            const std::string& needle) {
    expect_write_refused(p, m, rows, mine, needle);
  };
  const std::int64_t rows = static_cast<std::int64_t>(kShard.size());
  // a whole-run file whose rows are not the indices
  {
    auto mine = my_records(Dist::Cyclic);
    for (auto& r : mine) r.row = (r.index + 1) % kP;
    expect_refused(make_meta(), kP, mine, "differs from the index");
  }
  // the same point in two rows of a shard (on different ranks when 2 ranks)
  {
    auto mine = my_shard_records();
    for (auto& r : mine)
      if (r.row == 1) r.index = kShard[0];
    expect_refused(shard_meta(), rows, mine, "more than one row");
  }
  // total_points below the rows; a row out of range; a negative row; an
  // index out of range of total_points
  {
    RunMeta m = make_meta();
    m.total_points = 5;
    expect_refused(m, kP, my_records(Dist::Cyclic), "smaller than");
    auto mine = my_shard_records();
    if (g_rank == 0) mine.front().row = rows;
    expect_refused(shard_meta(), rows, mine, "outside");
    mine = my_shard_records();
    if (g_rank == 0) mine.front().row = -2;
    expect_refused(shard_meta(), rows, mine, "negative");
    mine = my_shard_records();
    if (g_rank == 0) mine.front().index = kP;
    expect_refused(shard_meta(), rows, mine, "index outside");
  }
  // a row left out of a shard
  {
    auto mine = my_shard_records();
    mine.erase(std::remove_if(mine.begin(), mine.end(), [](const PointRecord& r) { return r.row == 2; }),
               mine.end());
    expect_refused(shard_meta(), rows, mine, "row 2");
  }
  // exponent_errors of the wrong length, on the last rank only
  {
    auto mine = my_records(Dist::Cyclic);
    if (g_rank == g_size - 1) mine.back().exponent_errors.push_back(1.0);
    expect_refused(make_meta(), kP, mine, "exponent_errors");
  }
}

TEST(ResultFile, StatsGroup) {
  const std::string p = scratch("stats.h5");
  const EnsembleStats st = make_stats();
  // only rank 0 passes the statistics
  write_results(MPI_COMM_WORLD, p, false, make_axes(), make_meta(), kP, my_records(Dist::Cyclic),
                g_rank == 0 ? &st : nullptr);
  barrier();
  on_rank0([&] {
    {
      RFile rf(p);
      ASSERT_GE(rf.id, 0);
      const hid_t f = rf.id;
      const std::string meaning = attr_string(f, "/stats", "meaning");
      EXPECT_NE(meaning.find("ddof = 1"), std::string::npos) << meaning;
      EXPECT_NE(meaning.find("std / sqrt(count)"), std::string::npos) << meaning;
      EXPECT_NE(meaning.find("count < 2"), std::string::npos) << meaning;
      EXPECT_EQ(attr_strings(f, "/stats", "parameters"), st.param_names);
      EXPECT_EQ(attr_strings(f, "/stats", "columns"),
                (std::vector<std::string>{"lambda_max", "lyapunov_rate", "hilbert_cap", "ehrenfest_time"}));
      EXPECT_EQ(read_raw<std::int64_t>(f, "/stats/sweep", H5T_NATIVE_INT64), (std::vector<std::int64_t>{0, 1, 0}));
      EXPECT_EQ(read_raw<std::int64_t>(f, "/stats/sites", H5T_NATIVE_INT64), (std::vector<std::int64_t>{4, 6, 8}));
      EXPECT_EQ(read_raw<std::int64_t>(f, "/stats/count", H5T_NATIVE_INT64), st.count);
      EXPECT_TRUE(type_is(f, "/stats/count", H5T_STD_I64LE));
      for (const auto& c : st.columns) {
        const std::string base = "/stats/" + c.name;
        EXPECT_EQ(attr_string(f, base, "units"), c.units);
        EXPECT_EQ(attr_string(f, base, "meaning"), c.meaning);
        std::vector<hsize_t> dims{3};
        for (auto x : c.inner) dims.push_back(x);
        const std::vector<std::pair<std::string, const std::vector<double>*>> parts = {
            {"mean", &c.mean}, {"std", &c.std}, {"sem", &c.sem}, {"median", &c.median}};
        for (const auto& [name, want] : parts) {
          const std::string dp = base + "/" + name;
          ASSERT_TRUE(link_exists(f, dp)) << dp;
          EXPECT_EQ(shape_of(f, dp), dims) << dp;
          EXPECT_TRUE(type_is(f, dp, H5T_IEEE_F64LE)) << dp;
          EXPECT_EQ(attr_string(f, dp, "units"), c.units) << dp;
          EXPECT_FALSE(attr_string(f, dp, "meaning").empty()) << dp;
          const auto got = read_raw<double>(f, dp, H5T_NATIVE_DOUBLE);
          ASSERT_EQ(got.size(), want->size()) << dp;
          for (std::size_t k = 0; k < got.size(); ++k) EXPECT_EQ(bits(got[k]), bits((*want)[k])) << dp << " " << k;
        }
      }
      // std and sem are NaN where count < 2
      const auto sd = read_raw<double>(f, "/stats/lambda_max/std", H5T_NATIVE_DOUBLE);
      EXPECT_FALSE(std::isnan(sd[0]));
      EXPECT_TRUE(std::isnan(sd[1]));
      EXPECT_TRUE(std::isnan(sd[2]));
      EXPECT_DOUBLE_EQ(read_raw<double>(f, "/stats/lambda_max/sem", H5T_NATIVE_DOUBLE)[0], 0.5 / std::sqrt(3.0));
    }
    const ResultData d = read_results(p);
    ASSERT_EQ(d.stats.groups(), 3);
    EXPECT_EQ(d.stats.param_names, st.param_names);
    EXPECT_EQ(d.stats.params, st.params);
    EXPECT_EQ(d.stats.count, st.count);
    ASSERT_EQ(d.stats.columns.size(), st.columns.size());
    for (std::size_t i = 0; i < st.columns.size(); ++i) {
      const auto &a = d.stats.columns[i], &b = st.columns[i];
      EXPECT_EQ(a.name, b.name);
      EXPECT_EQ(a.inner, b.inner);
      EXPECT_EQ(a.units, b.units);
      EXPECT_EQ(a.meaning, b.meaning);
      for (const auto& [x, y] : {std::pair{&a.mean, &b.mean}, std::pair{&a.std, &b.std},
                                 std::pair{&a.sem, &b.sem}, std::pair{&a.median, &b.median}}) {
        ASSERT_EQ(x->size(), y->size()) << a.name;
        for (std::size_t k = 0; k < x->size(); ++k) EXPECT_EQ(bits((*x)[k]), bits((*y)[k])) << a.name;
      }
    }
  });
  // same datasets whether the stats were passed by every rank or rank 0 only
  const std::string q = scratch("stats_all_ranks.h5");
  write_results(MPI_COMM_WORLD, q, false, make_axes(), make_meta(), kP, my_records(Dist::UnevenReversed), &st);
  barrier();
  on_rank0([&] {
    const auto a = dataset_bytes(p), b = dataset_bytes(q);
    EXPECT_EQ(a.size(), b.size());
    for (const auto& [k, v] : a) EXPECT_TRUE(b.count(k) && b.at(k) == v) << k;
  });
  // stats without groups: no /stats
  const std::string e = scratch("stats_empty.h5");
  EnsembleStats none;
  write_results(MPI_COMM_WORLD, e, false, make_axes(), make_meta(), kP, my_records(Dist::Cyclic), &none);
  barrier();
  on_rank0([&] {
    RFile rf(e);
    EXPECT_FALSE(link_exists(rf.id, "/stats"));
  });
  // invalid stats are refused on every rank before anything is written
  auto expect_refused = [&](const EnsembleStats& bad, const std::string& needle) {
    const std::string r = scratch("stats_bad.h5");
    try {
      write_results(MPI_COMM_WORLD, r, false, make_axes(), make_meta(), kP, my_records(Dist::Cyclic),
                    g_rank == 0 ? &bad : nullptr);
      ADD_FAILURE() << "no exception for " << needle;
    } catch (const ResultFileError& ex) {
      EXPECT_NE(std::string(ex.what()).find(needle), std::string::npos) << ex.what();
    }
    barrier();
    on_rank0([&] { EXPECT_FALSE(output_exists(r)); });
  };
  {
    EnsembleStats bad = st;
    bad.columns[1].name = "count";
    expect_refused(bad, "used twice");
    bad = st;
    bad.columns[2].median.pop_back();
    expect_refused(bad, "median");
    bad = st;
    bad.params.pop_back();
    expect_refused(bad, "parameter values");
    bad = st;
    bad.columns[0].name = "a/b";
    expect_refused(bad, "invalid name");
  }
}

// A layout-1 file from before the additions (no /points/index, no
// exponent_error, no /chaos/solver, no config_hash / total_points / shard)
// still reads, with the documented defaults.
TEST(ResultFile, ReadResultsOfOlderLayout1File) {
  const std::string p = scratch("older.h5");
  write_results(MPI_COMM_WORLD, p, false, make_axes(), make_meta(), kP, my_records(Dist::Cyclic));
  barrier();
  on_rank0([&] {
    {
      EditFile f(p);
      ASSERT_GE(f.id, 0);
      for (const char* l : {"/points/index", "/chaos/exponent_error", "/chaos/solver", "/entanglement"})
        ASSERT_GE(H5Ldelete(f.id, l, H5P_DEFAULT), 0) << l;
      for (const char* a : {"config_hash", "total_points", "shard", "schema", "schema_hash"}) ASSERT_GE(H5Adelete(f.id, a), 0) << a;
    }
    const ResultData d = read_results(p);
    EXPECT_TRUE(d.axes.schema.empty());
    EXPECT_EQ(d.meta.config_hash, "");
    EXPECT_EQ(d.meta.total_points, kP);
    EXPECT_EQ(d.meta.shard, "");
    ASSERT_EQ(d.records.size(), static_cast<std::size_t>(kP));
    const PointRecord defaults;
    for (std::int64_t i = 0; i < kP; ++i) {
      PointRecord r = make_record(i);
      r.exponent_errors.clear();
      r.solver = defaults.solver;
      r.solver_converged = defaults.solver_converged;
      r.solver_iterations = defaults.solver_iterations;
      r.solver_residual = defaults.solver_residual;
      r.solver_time = defaults.solver_time;
      r.solver_ranks = defaults.solver_ranks;
      r.cluster_count = defaults.cluster_count;
      r.cluster_spread = defaults.cluster_spread;
      r = without_entanglement(r);
      toral_test::expect_identical_records(d.records[static_cast<std::size_t>(i)], canonical(r, i), "point " + std::to_string(i));
    }
  });
}

TEST(ResultFile, ReadResultsErrors) {
  const std::string good = scratch("good.h5");
  write_results(MPI_COMM_WORLD, good, false, make_axes(), make_meta(), kP, my_records(Dist::Cyclic));
  barrier();
  on_rank0([&] {
    ASSERT_NO_THROW(read_results(good));
    // no file
    expect_read_error(scratch("no_such.h5"), "no such file");
    // not HDF5 at all
    const std::string text = scratch("text.h5");
    {
      std::ofstream o(text);
      o << "time,lambda\n0,1.5\n";
    }
    expect_read_error(text, "not an HDF5 file");
    // HDF5, but not toral's
    const std::string other = scratch("other.h5");
    {
      const hid_t f = H5Fcreate(other.c_str(), H5F_ACC_TRUNC, H5P_DEFAULT, H5P_DEFAULT);
      ASSERT_GE(f, 0);
      const hsize_t n = 4;
      const hid_t sp = H5Screate_simple(1, &n, nullptr);
      const hid_t d = H5Dcreate2(f, "temperature", H5T_IEEE_F64LE, sp, H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
      const double v[4] = {1, 2, 3, 4};
      H5Dwrite(d, H5T_NATIVE_DOUBLE, H5S_ALL, H5S_ALL, H5P_DEFAULT, v);
      H5Dclose(d);
      H5Sclose(sp);
      H5Fclose(f);
    }
    expect_read_error(other, "not a toral result file");
    // the first half of a real file
    const std::string half = scratch("half.h5");
    {
      const std::string bytes = slurp(good);
      ASSERT_GT(bytes.size(), 4096u);
      std::ofstream o(half, std::ios::binary);
      o.write(bytes.data(), static_cast<std::streamsize>(bytes.size() / 2));
    }
    expect_read_error(half, "corrupt");
    // an unsupported layout version: files of an older toral (version 1 had
    // /bounds/cuts per point and lightcone_rate per N; version 2 had no
    // declared schema or dimension scales), and a future one
    for (const std::int64_t version : {std::int64_t{1}, std::int64_t{2}, std::int64_t{4}}) {
      const std::string vf = scratch("v" + std::to_string(version) + ".h5");
      fs::copy_file(good, vf);
      {
        EditFile f(vf);
        ASSERT_GE(f.id, 0);
        const hid_t a = H5Aopen(f.id, "layout_version", H5P_DEFAULT);
        ASSERT_GE(H5Awrite(a, H5T_NATIVE_INT64, &version), 0);
        H5Aclose(a);
      }
      expect_read_error(vf, "unsupported layout version " + std::to_string(version) +
                                " (this toral reads layout version 3; " +
                                (version < 3 ? "rerun the config" : "written by a newer toral"));
    }
    // a required dataset missing
    const std::string miss = scratch("missing_dataset.h5");
    fs::copy_file(good, miss);
    {
      EditFile f(miss);
      ASSERT_GE(H5Ldelete(f.id, "/chaos/exponents", H5P_DEFAULT), 0);
    }
    expect_read_error(miss, "missing dataset /chaos/exponents");
    // a dataset of the wrong length
    const std::string shape = scratch("bad_shape.h5");
    fs::copy_file(good, shape);
    {
      EditFile f(shape);
      ASSERT_GE(H5Ldelete(f.id, "/chaos/ks_rate", H5P_DEFAULT), 0);
      const hsize_t n = kP - 1;
      const hid_t sp = H5Screate_simple(1, &n, nullptr);
      const hid_t d = H5Dcreate2(f.id, "/chaos/ks_rate", H5T_IEEE_F64LE, sp, H5P_DEFAULT, H5P_DEFAULT, H5P_DEFAULT);
      H5Dclose(d);
      H5Sclose(sp);
    }
    expect_read_error(shape, "/chaos/ks_rate has shape (10,)");
    // a directory
    expect_read_error(g_dir, "directory");
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
