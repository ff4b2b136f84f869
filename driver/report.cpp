#include "report.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <iomanip>
#include <limits>
#include <map>
#include <sstream>

#include "compute.hpp"

namespace toral {

namespace {

std::string num(double x, int prec = 6) {
  if (std::isnan(x)) return "nan";
  if (std::isinf(x)) return x > 0 ? "inf" : "-inf";
  std::ostringstream os;
  os << std::setprecision(prec) << x;
  return os.str();
}

std::string json_num(double x) {
  if (!std::isfinite(x)) return "null";
  std::ostringstream os;
  os << std::setprecision(17) << x;
  return os.str();
}

std::string json_str(const std::string& s) {
  std::string o = "\"";
  for (char ch : s) {
    if (ch == '"' || ch == '\\') {
      o += '\\';
      o += ch;
    } else if (static_cast<unsigned char>(ch) < 0x20) {
      char buf[8];
      std::snprintf(buf, sizeof buf, "\\u%04x", ch);
      o += buf;
    } else {
      o += ch;
    }
  }
  return o + "\"";
}

std::string json_array(const std::vector<double>& v) {
  std::string o = "[";
  for (std::size_t i = 0; i < v.size(); ++i) o += (i ? ", " : "") + json_num(v[i]);
  return o + "]";
}

}  // namespace

void print_run_summary(MPI_Comm comm, const Config& c, const ParamTable&, const std::vector<PointRecord>& local,
                       std::int64_t total, double seconds, const std::string& output) {
  int rank = 0, size = 1;
  MPI_Comm_rank(comm, &rank);
  MPI_Comm_size(comm, &size);
  // per point: sweep, status, method, lambda_max, ks_density
  constexpr int W = 5;
  std::vector<double> mine;
  for (const auto& r : local) {
    const double v[W] = {static_cast<double>(r.params[0]), static_cast<double>(r.status),
                         static_cast<double>(r.method), r.lambda_max, r.ks_density};
    mine.insert(mine.end(), v, v + W);
  }
  int n = static_cast<int>(mine.size());
  std::vector<int> counts(static_cast<std::size_t>(size)), displs(static_cast<std::size_t>(size));
  MPI_Gather(&n, 1, MPI_INT, counts.data(), 1, MPI_INT, 0, comm);
  std::vector<double> all;
  if (rank == 0) {
    int off = 0;
    for (int i = 0; i < size; ++i) {
      displs[static_cast<std::size_t>(i)] = off;
      off += counts[static_cast<std::size_t>(i)];
    }
    all.resize(static_cast<std::size_t>(off));
  }
  MPI_Gatherv(mine.data(), n, MPI_DOUBLE, all.data(), counts.data(), displs.data(), MPI_DOUBLE, 0, comm);
  if (rank != 0) return;

  struct Row {
    long long points = 0, failed = 0, bloch = 0, dense = 0;
    double lmin = std::numeric_limits<double>::infinity(), lmax = -lmin, lsum = 0;
    double hmin = lmin, hmax = -lmin, hsum = 0;
  };
  std::vector<Row> rows(c.sweeps.size());
  for (std::size_t k = 0; k + W <= all.size(); k += W) {
    Row& r = rows[static_cast<std::size_t>(all[k])];
    ++r.points;
    if (all[k + 1] != 0) {
      ++r.failed;
      continue;
    }
    r.bloch += all[k + 2] == static_cast<double>(Method::Bloch);
    r.dense += all[k + 2] == static_cast<double>(Method::Dense);
    r.lmin = std::min(r.lmin, all[k + 3]);
    r.lmax = std::max(r.lmax, all[k + 3]);
    r.lsum += all[k + 3];
    r.hmin = std::min(r.hmin, all[k + 4]);
    r.hmax = std::max(r.hmax, all[k + 4]);
    r.hsum += all[k + 4];
  }
  std::printf("\n%-16s %7s %6s %6s %6s  %-28s  %-28s\n", "sweep", "points", "failed", "bloch", "dense",
              "lambda_max  min / mean / max", "ks_density  min / mean / max");
  for (std::size_t i = 0; i < rows.size(); ++i) {
    const Row& r = rows[i];
    const long long ok = r.points - r.failed;
    auto trip = [&](double a, double s, double b) {
      return ok ? num(a, 4) + " / " + num(s / ok, 4) + " / " + num(b, 4) : std::string("-");
    };
    std::printf("%-16s %7lld %6lld %6lld %6lld  %-28s  %-28s\n", c.sweeps[i].name.c_str(), r.points, r.failed,
                r.bloch, r.dense, trip(r.lmin, r.lsum, r.lmax).c_str(), trip(r.hmin, r.hsum, r.hmax).c_str());
  }
  long long failed = 0;
  for (const auto& r : rows) failed += r.failed;
  std::printf("\n%lld points (%lld failed) on %d rank%s in %.2f s -> %s\n", static_cast<long long>(total), failed,
              size, size == 1 ? "" : "s", seconds, output.c_str());
  std::fflush(stdout);
}

void print_point(std::ostream& os, const Config& c, const ParamTable& t, const Point& p, const PointRecord& r,
                 bool json) {
  const SweepSpec& s = c.sweeps[static_cast<std::size_t>(p.sweep)];
  const std::size_t nl = c.bounds.regions.size(), nn = c.bounds.local_dims.size();
  if (json) {
    os << "{\n  \"index\": " << p.index << ",\n  \"sweep_name\": " << json_str(s.name) << ",\n";
    for (std::size_t i = 0; i < t.names.size(); ++i)
      os << "  \"/points/" << t.names[i] << "\": "
         << (r.params[i] == kAbsent ? std::string("null") : std::to_string(r.params[i])) << ",\n";
    os << "  \"/points/status\": " << r.status << ",\n  \"/points/message\": " << json_str(r.message)
       << ",\n  \"/points/method\": " << r.method << ",\n  \"/points/wall_time\": " << json_num(r.wall_time)
       << ",\n  \"/chaos/lambda_max\": " << json_num(r.lambda_max) << ",\n  \"/chaos/ks_rate\": "
       << json_num(r.ks_rate) << ",\n  \"/chaos/ks_density\": " << json_num(r.ks_density)
       << ",\n  \"/chaos/unstable_count\": " << r.unstable_count << ",\n  \"/chaos/exponents\": "
       << json_array(r.exponents) << ",\n  \"/chaos/accuracy/pairing_defect\": " << json_num(r.pairing_defect)
       << ",\n  \"/chaos/accuracy/sum_defect\": " << json_num(r.sum_defect)
       << ",\n  \"/chaos/accuracy/error_bound\": " << json_num(r.error_bound)
       << ",\n  \"/chaos/histogram/counts\": " << json_array(r.hist_counts)
       << ",\n  \"/chaos/histogram/edges\": " << json_array(r.hist_edges);
    if (c.spectrum.bulk_limit)
      os << ",\n  \"/limit/lambda_max\": " << json_num(r.limit_lambda_max) << ",\n  \"/limit/ks_density\": "
         << json_num(r.limit_ks_density) << ",\n  \"/limit/accuracy\": " << json_num(r.limit_accuracy);
    std::vector<double> ells(c.bounds.regions.begin(), c.bounds.regions.end()),
        Ns(c.bounds.local_dims.begin(), c.bounds.local_dims.end());
    os << ",\n  \"/bounds/region_size\": " << json_array(ells) << ",\n  \"/bounds/local_dim\": " << json_array(Ns)
       << ",\n  \"/bounds/cuts\": " << r.cuts << ",\n  \"/bounds/lyapunov_rate\": " << json_array(r.lyapunov_rate)
       << ",\n  \"/bounds/hilbert_cap\": " << json_array(r.hilbert_cap)
       << ",\n  \"/bounds/lightcone_rate\": " << json_array(r.lightcone_rate)
       << ",\n  \"/bounds/ehrenfest_time\": " << json_array(r.ehrenfest_time)
       << ",\n  \"/bounds/saturation_lyapunov\": " << json_array(r.saturation_lyapunov)
       << ",\n  \"/bounds/saturation_lightcone\": " << json_array(r.saturation_lightcone) << "\n}\n";
    return;
  }
  os << "point " << p.index << " of sweep \"" << s.name << "\": " << point_identity(c, p);
  if (p.seed >= 0) os << ", seed " << p.seed;
  os << "\n";
  if (r.status != 0) {
    os << "  FAILED (status " << r.status << "): " << r.message << "\n";
    return;
  }
  os << "  method              " << method_name(static_cast<Method>(r.method)) << " (" << num(r.wall_time, 3)
     << " s)\n"
     << "  lambda_max          " << num(r.lambda_max, 12) << "  per period\n"
     << "  KS rate h           " << num(r.ks_rate, 12) << "  per period\n"
     << "  KS density h/L      " << num(r.ks_density, 12) << "  per site and period\n"
     << "  positive exponents  " << r.unstable_count << " of " << 2 * p.L << "\n"
     << "  accuracy            pairing " << num(r.pairing_defect, 3) << ", sum " << num(r.sum_defect, 3)
     << ", error bound " << num(r.error_bound, 3) << "\n";
  os << "  top exponents      ";
  for (std::size_t i = 0; i < std::min<std::size_t>(8, r.exponents.size()); ++i) os << ' ' << num(r.exponents[i], 8);
  os << (r.exponents.size() > 8 ? " ..." : "") << "\n";
  if (!std::isnan(r.limit_lambda_max))
    os << "  bulk limit L->inf   lambda_max " << num(r.limit_lambda_max, 12) << ", KS density "
       << num(r.limit_ks_density, 12) << " (+- " << num(r.limit_accuracy, 2) << ")\n";
  os << "  bounds (region of ell sites, " << r.cuts << " cut" << (r.cuts == 1 ? "" : "s") << "):\n";
  os << "    " << std::setw(6) << "ell" << std::setw(14) << "Lyap. rate";
  for (std::size_t j = 0; j < nn; ++j) os << std::setw(14) << ("cap N=" + std::to_string(c.bounds.local_dims[j]));
  os << "\n";
  for (std::size_t i = 0; i < nl; ++i) {
    os << "    " << std::setw(6) << c.bounds.regions[i] << std::setw(14) << num(r.lyapunov_rate[i], 6);
    for (std::size_t j = 0; j < nn; ++j) os << std::setw(14) << num(r.hilbert_cap[i * nn + j], 6);
    os << "\n";
  }
  os << "    " << std::setw(6) << "N" << std::setw(14) << "light-cone" << std::setw(14) << "Ehrenfest t" << "\n";
  for (std::size_t j = 0; j < nn; ++j)
    os << "    " << std::setw(6) << c.bounds.local_dims[j] << std::setw(14) << num(r.lightcone_rate[j], 6)
       << std::setw(14) << num(r.ehrenfest_time[j], 6) << "\n";
}

void print_check(std::ostream& os, const Config& c) {
  const auto points = expand(c);
  std::map<int, std::map<std::string, long long>> methods;
  std::vector<double> flops(c.sweeps.size(), 0.0);
  std::vector<long long> count(c.sweeps.size(), 0);
  for (const auto& p : points) {
    const Circuit circ = build_circuit(c, p);
    std::string why;
    const Method m = choose_method(c, circ, why);
    ++methods[p.sweep][m == Method::None ? "unsolvable" : method_name(m)];
    flops[static_cast<std::size_t>(p.sweep)] += estimated_flops(c, p);
    ++count[static_cast<std::size_t>(p.sweep)];
  }
  os << c.source << ": valid, " << points.size() << " points in " << c.sweeps.size() << " sweep"
     << (c.sweeps.size() == 1 ? "" : "s") << "\n";
  double total = 0;
  for (std::size_t i = 0; i < c.sweeps.size(); ++i) {
    os << "  " << std::left << std::setw(16) << c.sweeps[i].name << std::right << std::setw(8) << count[i]
       << " points  ";
    for (const auto& [name, n] : methods[static_cast<int>(i)]) os << name << ' ' << n << "  ";
    os << "~" << num(flops[i] / 1e9, 3) << " Gflop\n";
    total += flops[i];
  }
  // 1 Gflop/s per core is a deliberately pessimistic rate for dgeevx.
  os << "  rough cost: " << num(total / 1e9, 3) << " Gflop, about " << num(total / 1e9, 3)
     << " core-seconds at 1 Gflop/s\n";
  for (const auto& [sw, m] : methods)
    if (m.count("unsolvable"))
      os << "  warning: " << m.at("unsolvable") << " points of sweep \"" << c.sweeps[static_cast<std::size_t>(sw)].name
         << "\" have no spectrum method (too large for dense, not translation-invariant); they will be recorded as failed\n";
}

}  // namespace toral
