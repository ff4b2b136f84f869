#include "report.hpp"

#include <algorithm>
#include <chrono>
#include <tuple>
#include <cmath>
#include <cstdio>
#include <iomanip>
#include <limits>
#include <map>
#include <sstream>

#include "bloch.hpp"
#include "compute.hpp"
#include "text_format.hpp"

namespace toral {

namespace {

// The diagnostics' coordinates and values of `r` as JSON members, keyed by
// dataset path (driver/diagnostic.hpp): 1-D coordinates and fields as flat
// arrays of the held values, scalar fields as numbers, 2-D integer
// coordinates as nested rows without their -1 padding.
void print_diagnostics_json(std::ostream& os, const Config& c, const PointRecord& r) {
  const Schema s = run_schema(c);
  auto m = [&](const std::string& path, const std::string& value) { os << ",\n  \"" << path << "\": " << value; };
  for (const CoordDecl& cd : s.coords) {
    if (cd.dims.size() == 2 && cd.type == Elem::I64) {
      const std::size_t w = s.axis(cd.dims[1])->size();
      std::string rows = "[";
      for (std::size_t i = 0; w > 0 && i * w < cd.i.size(); ++i) {
        std::vector<std::int64_t> row;
        for (std::size_t j = 0; j < w; ++j)
          if (cd.i[i * w + j] != -1) row.push_back(cd.i[i * w + j]);
        rows += (i ? ", " : "") + json_array(row);
      }
      m(cd.path, rows + "]");
    } else {
      m(cd.path, cd.type == Elem::F64 ? json_array(cd.f) : json_array(cd.i));
    }
  }
  for (std::size_t k = 0; k < s.fields.size(); ++k) {
    const FieldDecl& fd = s.fields[k];
    static const FieldValue none;
    const FieldValue& v = k < r.fields.size() ? r.fields[k] : none;
    if (fd.dims.empty() && fd.type == Elem::F64) m(fd.path, json_num(v.f.empty() ? kNaN : v.f[0]));
    else if (fd.dims.empty()) m(fd.path, v.i.empty() ? std::string("-1") : std::to_string(v.i[0]));
    else m(fd.path, fd.type == Elem::F64 ? json_array(v.f) : json_array(v.i));
  }
}

// Each enabled diagnostic's own table (Diagnostic::print_text).
void print_diagnostics_text(std::ostream& os, const Config& c, const PointRecord& r) {
  std::vector<std::size_t> off;
  (void)run_schema(c, &off);
  const auto& reg = diagnostics();
  for (std::size_t k = 0; k < reg.size(); ++k) {
    if (!diagnostic_spec(c, k).enabled) continue;
    std::vector<FieldValue> slice(off[k + 1] - off[k]);
    for (std::size_t j = off[k]; j < off[k + 1] && j < r.fields.size(); ++j) slice[j - off[k]] = r.fields[j];
    reg[k]->print_text(os, c, slice);
  }
}

}  // namespace

void print_run_summary(MPI_Comm comm, const Config& c, const ParamTable&, const std::vector<PointRecord>& local,
                       std::int64_t total, double seconds, const std::string& output, double busy) {
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
  double busy_sum = 0.0, busy_max = 0.0;
  MPI_Reduce(&busy, &busy_sum, 1, MPI_DOUBLE, MPI_SUM, 0, comm);
  MPI_Reduce(&busy, &busy_max, 1, MPI_DOUBLE, MPI_MAX, 0, comm);
  if (rank != 0) return;

  // min / mean / max over the points where a value exists: krylov and
  // tangent points have no KS density (NaN), and are not averaged as such.
  struct Range {
    long long n = 0;
    double lo = std::numeric_limits<double>::infinity(), hi = -lo, sum = 0;
    void add(double x) {
      if (std::isnan(x)) return;
      ++n;
      lo = std::min(lo, x);
      hi = std::max(hi, x);
      sum += x;
    }
    std::string text() const { return n ? num(lo, 4) + " / " + num(sum / n, 4) + " / " + num(hi, 4) : "-"; }
  };
  struct Row {
    long long points = 0, failed = 0, bloch = 0, dense = 0, krylov = 0, tangent = 0;
    Range lambda, ks;
  };
  std::vector<Row> rows(c.sweeps.size());
  for (std::size_t k = 0; k + W <= all.size(); k += W) {
    Row& r = rows[static_cast<std::size_t>(all[k])];
    ++r.points;
    if (all[k + 1] != 0) {
      ++r.failed;
      continue;
    }
    const auto m = static_cast<Method>(static_cast<int>(all[k + 2]));
    r.bloch += m == Method::Bloch;
    r.dense += m == Method::Dense;
    r.krylov += m == Method::Krylov;
    r.tangent += m == Method::Tangent;
    r.lambda.add(all[k + 3]);
    r.ks.add(all[k + 4]);
  }
  std::printf("\n%-16s %7s %6s %6s %6s %6s %7s  %-28s  %-28s\n", "sweep", "points", "failed", "bloch", "dense",
              "krylov", "tangent",
              "lambda_max  min / mean / max", "ks_density  min / mean / max");
  for (std::size_t i = 0; i < rows.size(); ++i) {
    const Row& r = rows[i];
    std::printf("%-16s %7lld %6lld %6lld %6lld %6lld %7lld  %-28s  %-28s\n", c.sweeps[i].name.c_str(), r.points,
                r.failed, r.bloch, r.dense, r.krylov, r.tangent, r.lambda.text().c_str(), r.ks.text().c_str());
  }
  long long failed = 0;
  for (const auto& r : rows) failed += r.failed;
  std::printf("\n%lld points (%lld failed) on %d rank%s in %.2f s -> %s\n", static_cast<long long>(total), failed,
              size, size == 1 ? "" : "s", seconds, output.c_str());
  if (busy_sum > 0)
    std::printf("load balance: ranks computed %.1f%% of %d x %.2f s (busiest rank %.2f s)\n",
                100.0 * busy_sum / (size * std::max(seconds, 1e-9)), size, seconds, busy_max);
  std::fflush(stdout);
}

void print_point(std::ostream& os, const Config& c, const ParamTable& t, const Point& p, const PointRecord& r,
                 bool json) {
  const SweepSpec& s = c.sweeps[static_cast<std::size_t>(p.sweep)];
  const std::size_t nl = c.bounds.regions.size(), nn = c.bounds.local_dims.size();
  if (json) {
    // As in the file: one error per exponent, NaN (null) where not estimated.
    std::vector<double> errors = r.exponent_errors;
    if (errors.size() != r.exponents.size()) errors.assign(r.exponents.size(), kNaN);
    os << "{\n  \"index\": " << p.index << ",\n  \"sweep_name\": " << json_str(s.name) << ",\n";
    for (std::size_t i = 0; i < t.names.size(); ++i)
      os << "  \"/points/" << t.names[i] << "\": "
         << (r.params[i] == kAbsent ? std::string("null") : std::to_string(r.params[i])) << ",\n";
    os << "  \"/points/status\": " << r.status << ",\n  \"/points/message\": " << json_str(r.message)
       << ",\n  \"/points/method\": " << r.method << ",\n  \"/points/wall_time\": " << json_num(r.wall_time)
       << ",\n  \"/chaos/lambda_max\": " << json_num(r.lambda_max) << ",\n  \"/chaos/ks_rate\": "
       << json_num(r.ks_rate) << ",\n  \"/chaos/ks_density\": " << json_num(r.ks_density)
       << ",\n  \"/chaos/unstable_count\": " << r.unstable_count << ",\n  \"/chaos/zero_count\": " << r.zero_count
       << ",\n  \"/chaos/zero_certified\": " << r.zero_certified << ",\n  \"/chaos/exponents\": "
       << json_array(r.exponents) << ",\n  \"/chaos/exponent_error\": " << json_array(errors)
       << ",\n  \"/chaos/accuracy/pairing_defect\": " << json_num(r.pairing_defect)
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
       << ",\n  \"/bounds/cuts\": " << json_array(r.cuts) << ",\n  \"/bounds/lyapunov_rate\": " << json_array(r.lyapunov_rate)
       << ",\n  \"/bounds/hilbert_cap\": " << json_array(r.hilbert_cap)
       << ",\n  \"/bounds/lightcone_rate\": " << json_array(r.lightcone_rate)
       << ",\n  \"/bounds/ehrenfest_time\": " << json_array(r.ehrenfest_time)
       << ",\n  \"/bounds/saturation_lyapunov\": " << json_array(r.saturation_lyapunov)
       << ",\n  \"/bounds/saturation_lightcone\": " << json_array(r.saturation_lightcone);
    print_diagnostics_json(os, c, r);  // the diagnostics' datasets (driver/diagnostic.hpp)
    os << "\n}\n";
    return;
  }
  os << "point " << p.index << " of sweep \"" << s.name << "\": " << point_identity(c, p);
  if (p.seed >= 0) os << ", seed " << p.seed;
  os << "\n";
  if (r.status == static_cast<std::int32_t>(PointStatus::Inaccurate)) {
    os << "  INACCURATE (status 8, values kept): " << r.message << "\n";
  } else if (r.status != 0) {
    os << "  FAILED (status " << r.status << "): " << r.message << "\n";
    print_diagnostics_text(os, c, r);
    return;
  }
  os << "  method              " << method_name(static_cast<Method>(r.method)) << " (" << num(r.wall_time, 3)
     << " s)\n"
     << "  lambda_max          " << num(r.lambda_max, 12) << "  per period\n"
     << "  KS rate h           " << num(r.ks_rate, 12) << "  per period\n"
     << "  KS density h/L      " << num(r.ks_density, 12) << "  per site and period\n"
     << "  positive exponents  " << r.unstable_count << " of " << 2 * p.L << ", zero " << r.zero_count
     << (r.zero_certified == 1 ? " (exact)" : r.zero_certified == 0 ? " (within error, not certified)" : "")
     << "\n"
     << "  accuracy            pairing " << num(r.pairing_defect, 3) << ", sum " << num(r.sum_defect, 3)
     << ", error bound " << num(r.error_bound, 3) << "\n";
  os << "  top exponents      ";
  for (std::size_t i = 0; i < std::min<std::size_t>(8, r.exponents.size()); ++i) os << ' ' << num(r.exponents[i], 8);
  os << (r.exponents.size() > 8 ? " ..." : "") << "\n";
  if (!std::isnan(r.limit_lambda_max))
    os << "  bulk limit L->inf   lambda_max " << num(r.limit_lambda_max, 12) << ", KS density "
       << num(r.limit_ks_density, 12) << " (+- " << num(r.limit_accuracy, 2) << ")\n";
  os << "  blocks of ell sites (cap and light-cone rate are bounds; Lambda_ell is the asymptotic rate of a\n"
     << "  generic region, not a bound):\n";
  os << "    " << std::setw(6) << "ell" << std::setw(6) << "cuts" << std::setw(12) << "Lambda_ell";
  for (std::size_t j = 0; j < nn; ++j) os << std::setw(11) << ("cap N=" + std::to_string(c.bounds.local_dims[j]));
  for (std::size_t j = 0; j < nn; ++j) os << std::setw(11) << ("l.c. N=" + std::to_string(c.bounds.local_dims[j]));
  os << "\n";
  for (std::size_t i = 0; i < nl; ++i) {
    os << "    " << std::setw(6) << c.bounds.regions[i] << std::setw(6) << (i < r.cuts.size() ? r.cuts[i] : -1)
       << std::setw(12) << num(r.lyapunov_rate[i], 6);
    for (std::size_t j = 0; j < nn; ++j) os << std::setw(11) << num(r.hilbert_cap[i * nn + j], 5);
    for (std::size_t j = 0; j < nn; ++j) os << std::setw(11) << num(r.lightcone_rate[i * nn + j], 5);
    os << "\n";
  }
  os << "    " << std::setw(6) << "N" << std::setw(14) << "Ehrenfest t" << "\n";
  for (std::size_t j = 0; j < nn; ++j)
    os << "    " << std::setw(6) << c.bounds.local_dims[j] << std::setw(14) << num(r.ehrenfest_time[j], 6) << "\n";
  print_diagnostics_text(os, c, r);  // driver/diagnostic.hpp
}

namespace {

struct Probe {
  double dense_flops_per_s = 1e9;  // dgeevx, with condition numbers
  double bloch_s_per_site = 1e-6;
  double bulk_s = 0.0;
};

// Times one small dense solve and one Bloch ring on this machine.
Probe calibrate(bool bulk) {
  using clk = std::chrono::steady_clock;
  Probe p;
  const std::int64_t n = 160;
  std::vector<double> a(static_cast<std::size_t>(n * n));
  for (std::size_t i = 0; i < a.size(); ++i) a[i] = std::sin(0.37 * static_cast<double>(i) + 0.11);
  auto t0 = clk::now();
  (void)dense_eigenvalues(a, n);
  const double td = std::chrono::duration<double>(clk::now() - t0).count();
  p.dense_flops_per_s = 30.0 * n * n * n / std::max(td, 1e-6);
  Circuit ring;
  ring.L = 20000;
  Mat2 cat;
  cat(0, 0) = 2; cat(0, 1) = 1; cat(1, 0) = 1; cat(1, 1) = 1;
  ring.bonds.assign(static_cast<std::size_t>(ring.L), BondGate::position(cat));
  t0 = clk::now();
  (void)bloch_spectrum(ring);
  p.bloch_s_per_site = std::chrono::duration<double>(clk::now() - t0).count() / static_cast<double>(ring.L);
  if (bulk) {
    t0 = clk::now();
    (void)bulk_limit(ring, 40);
    p.bulk_s = std::chrono::duration<double>(clk::now() - t0).count();
  }
  return p;
}

std::string bytes_str(double b) {
  char buf[32];
  if (b < 1024.0 * 1024)
    std::snprintf(buf, sizeof buf, "%.0f KiB", b / 1024);
  else if (b < 1024.0 * 1024 * 1024)
    std::snprintf(buf, sizeof buf, "%.1f MiB", b / 1024 / 1024);
  else
    std::snprintf(buf, sizeof buf, "%.2f GiB", b / 1024 / 1024 / 1024);
  return buf;
}

}  // namespace

void print_check(std::ostream& os, const Config& c, double memory_gb) {
  const auto points = expand(c);
  const Probe probe = calibrate(c.spectrum.bulk_limit);
  struct Class {
    long long count = 0;
    double seconds = 0, bytes = 0, flops = 0;
    std::vector<double> diag_seconds;  // per enabled diagnostic, probed on the class's first point
    double ent_seconds = 0;            // their sum
    double ent_bytes = 0;              // their share of `bytes`
  };
  // (sweep, L, boundary, method) -> cost class
  std::map<std::tuple<int, std::int64_t, int, std::string>, Class> classes;
  const int group = ranks_per_point(c, points, 1 << 20);
  for (const auto& p : points) {
    const Method m = planned_method(c, p);
    const SweepSpec& sw = c.sweeps[static_cast<std::size_t>(p.sweep)];
    const bool pos = !sw.bond.symplectic && !sw.site.present;
    bool ok = true;
    if (m == Method::Dense) ok = (pos ? p.L : 2 * p.L) <= c.spectrum.dense_max;
    if (m == Method::Bloch) ok = !sw.bond.drawn() && !sw.site.drawn() && p.boundary == Boundary::Periodic;
    if (sw.redrawn && m != Method::Tangent) ok = false;
    const std::string name = !ok ? "unsolvable" : method_name(m);
    Class& k = classes[{p.sweep, p.L, static_cast<int>(p.boundary), name}];
    if (++k.count > 1) continue;  // every point of a class costs about the same: cost its first
    for (std::size_t d = 0; d < diagnostics().size(); ++d) {
      if (!diagnostic_spec(c, d).enabled) continue;
      const DiagnosticEstimate e = diagnostics()[d]->estimate(c, p);
      k.diag_seconds.push_back(e.seconds);
      k.ent_seconds += e.seconds;
      k.ent_bytes += e.bytes;
    }
    const double ent_bytes = k.ent_bytes;
    const double L = static_cast<double>(p.L);
    const double dim = pos ? L : 2 * L;
    const double gates = 400.0 * L;  // gates, exponents and sort buffers
    k.flops = estimated_flops(c, p);
    if (m == Method::Dense) {
      k.seconds = k.flops / probe.dense_flops_per_s;
      k.bytes = ent_bytes + 4 * 8.0 * dim * dim + gates;  // A, left and right vectors, work
    } else if (distributed_method(m)) {
      // per rank of a group: the Krylov basis (2K + 15 vectors) or the k
      // tangent vectors, the sparse operator and a banded LU of bandwidth ~8
      const double vecs = m == Method::Krylov ? 2.0 * static_cast<double>(c.spectrum.krylov.count) + 15
                                              : 2.0 * static_cast<double>(c.spectrum.tangent.count) + 4;
      k.bytes = ent_bytes + dim * (8.0 * vecs + 8 * 24 + 8 * 40) / group;
      k.seconds = k.flops / probe.dense_flops_per_s / group;
    } else {
      k.seconds = L * probe.bloch_s_per_site + probe.bulk_s;
      k.bytes = ent_bytes + gates;
    }
  }
  os << c.source << ": valid, " << points.size() << " points in " << c.sweeps.size() << " sweep"
     << (c.sweeps.size() == 1 ? "" : "s") << "\n";
  os << "  probe on this machine: dense " << num(probe.dense_flops_per_s / 1e9, 3) << " Gflop/s, bloch "
     << num(probe.bloch_s_per_site * 1e9, 3) << " ns/site" << "\n";
  os << "  " << std::left << std::setw(16) << "sweep" << std::right << std::setw(10) << "L" << std::setw(10)
     << "boundary" << std::setw(12) << "method"
     << std::setw(9) << "points" << std::setw(12) << "s/point" << std::setw(12) << "memory" << std::setw(12) << "Gflop";
  std::string diag_names;  // the diagnostics, for the memory refusal
  for (std::size_t d = 0; d < diagnostics().size(); ++d)
    if (diagnostic_spec(c, d).enabled) {
      const std::string col = diagnostics()[d]->table() + " s";
      os << std::setw(static_cast<int>(std::max<std::size_t>(14, col.size() + 2))) << col;
      diag_names += (diag_names.empty() ? "" : ", ") + diagnostics()[d]->table();
    }
  os << "\n";
  double total_s = 0, total_flops = 0, worst = 0;
  long long unsolvable = 0;
  std::string worst_where;
  bool worst_is_entanglement = false;
  for (const auto& [key, k] : classes) {
    const auto& [sw, L, bc, name] = key;
    const char* bcname = static_cast<Boundary>(bc) == Boundary::Open ? "open" : "periodic";
    os << "  " << std::left << std::setw(16) << c.sweeps[static_cast<std::size_t>(sw)].name << std::right << std::setw(10)
       << L << std::setw(10) << bcname << std::setw(12) << name << std::setw(9) << k.count << std::setw(12) << num(k.seconds, 3) << std::setw(12)
       << bytes_str(k.bytes) << std::setw(12) << num(k.flops * k.count / 1e9, 3);
    {
      std::size_t i = 0;
      for (std::size_t d = 0; d < diagnostics().size(); ++d)
        if (diagnostic_spec(c, d).enabled && i < k.diag_seconds.size())
          os << std::setw(static_cast<int>(std::max<std::size_t>(14, diagnostics()[d]->table().size() + 4)))
             << num(k.diag_seconds[i++], 3);
    }
    os << "\n";
    if (name == "unsolvable") {
      unsolvable += k.count;
      continue;
    }
    total_s += (k.seconds + k.ent_seconds) * k.count;
    total_flops += k.flops * k.count;
    if (k.bytes > worst) {
      worst = k.bytes;
      worst_where = "sweep \"" + c.sweeps[static_cast<std::size_t>(sw)].name + "\": points with L = " +
                    std::to_string(L) + " (" + bcname + ", " + name + ")";
      worst_is_entanglement = k.ent_bytes > k.bytes / 2;
    }
  }
  if (std::any_of(classes.begin(), classes.end(), [](const auto& kv) {
        const auto& n = std::get<3>(kv.first);
        return n == "krylov" || n == "tangent";
      }))
    os << "  distributed points run on groups of " << group << " rank" << (group == 1 ? "" : "s")
       << " (spectrum.krylov.ranks_per_point; memory above is per rank of a group)\n";
  os << "  total: about " << num(total_s, 3) << " core-seconds (" << num(total_s / 3600, 3) << " core-hours), "
     << num(total_flops / 1e9, 3) << " Gflop; largest point " << bytes_str(worst) << " of " << num(memory_gb, 3)
     << " GiB per rank\n";
  if (unsolvable)
    os << "  warning: " << unsolvable
       << " points have no spectrum method (too large for dense and not a clean periodic ring, or redrawn in time); "
          "they will be recorded as failed\n";
  if (worst > memory_gb * 1024 * 1024 * 1024)
    throw ConfigError(c.source + ": " + worst_where + " need about " + bytes_str(worst) + " each, more than " +
                      "--memory-per-rank " + num(memory_gb, 3) + " GiB (" +
                      (worst_is_entanglement ? "mostly the diagnostics (" + diag_names + "): fewer sites or a smaller table"
                                             : "lower spectrum.dense_max") +
                      ", or use more memory)");
}

}  // namespace toral
