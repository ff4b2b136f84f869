#include "run.hpp"

#include <chrono>
#include <cmath>
#include <cstdio>

#include "compute.hpp"
#include "report.hpp"
#include "result_file.hpp"
#include "sweep.hpp"

namespace toral {

namespace {

// A global counter of finished points in an MPI window on rank 0, so rank 0
// can report the whole run's progress while every rank works on its share.
class ProgressCounter {
 public:
  explicit ProgressCounter(MPI_Comm comm) : comm_(comm) {
    MPI_Comm_rank(comm, &rank_);
    MPI_Win_allocate(rank_ == 0 ? 2 * sizeof(long long) : 0, sizeof(long long), MPI_INFO_NULL, comm,
                     &base_, &win_);
    if (rank_ == 0) base_[0] = base_[1] = 0;
    MPI_Barrier(comm);
  }
  ~ProgressCounter() { MPI_Win_free(&win_); }
  ProgressCounter(const ProgressCounter&) = delete;
  ProgressCounter& operator=(const ProgressCounter&) = delete;

  // Adds one finished point (and one failure if failed); returns the totals.
  void add(bool failed, long long& done, long long& bad) {
    long long inc[2] = {1, failed ? 1 : 0}, out[2] = {0, 0};
    MPI_Win_lock(MPI_LOCK_SHARED, 0, 0, win_);
    MPI_Fetch_and_op(&inc[0], &out[0], MPI_LONG_LONG, 0, 0, MPI_SUM, win_);
    MPI_Fetch_and_op(&inc[1], &out[1], MPI_LONG_LONG, 0, 1, MPI_SUM, win_);
    MPI_Win_unlock(0, win_);
    done = out[0] + 1;
    bad = out[1] + inc[1];
  }
  void read(long long& done, long long& bad) {
    long long zero = 0;
    MPI_Win_lock(MPI_LOCK_SHARED, 0, 0, win_);
    MPI_Fetch_and_op(&zero, &done, MPI_LONG_LONG, 0, 0, MPI_NO_OP, win_);
    MPI_Fetch_and_op(&zero, &bad, MPI_LONG_LONG, 0, 1, MPI_NO_OP, win_);
    MPI_Win_unlock(0, win_);
  }

 private:
  MPI_Comm comm_;
  int rank_ = 0;
  long long* base_ = nullptr;
  MPI_Win win_;
};

std::string fmt_seconds(double s) {
  char buf[32];
  if (!std::isfinite(s)) return "?";
  if (s < 120)
    std::snprintf(buf, sizeof buf, "%.0fs", s);
  else if (s < 7200)
    std::snprintf(buf, sizeof buf, "%.1fmin", s / 60);
  else
    std::snprintf(buf, sizeof buf, "%.1fh", s / 3600);
  return buf;
}

}  // namespace

RunOutcome run_sweep(MPI_Comm comm, const Config& c, const RunOptions& o) {
  int rank = 0, size = 1;
  MPI_Comm_rank(comm, &rank);
  MPI_Comm_size(comm, &size);
  const auto t0 = std::chrono::steady_clock::now();
  const ParamTable table = param_table(c);
  const std::vector<Point> points = expand(c);
  const auto total = static_cast<std::int64_t>(points.size());

  std::vector<PointRecord> local;
  {
    ProgressCounter progress(comm);
    double last_print = -1e9;
    long long done = 0, bad = 0;
    for (std::int64_t i = rank; i < total; i += size) {
      local.push_back(compute_point(c, table, points[static_cast<std::size_t>(i)]));
      progress.add(local.back().status != 0, done, bad);
      if (rank == 0 && !o.quiet) {
        const double el = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
        if (el - last_print >= 1.0) {
          progress.read(done, bad);
          const double rate = done / std::max(el, 1e-9);
          std::fprintf(stderr, "toral: %lld/%lld points, %lld failed, %.1f points/s, ETA %s\n", done,
                       static_cast<long long>(total), bad, rate, fmt_seconds((total - done) / rate).c_str());
          last_print = el;
        }
      }
    }
    MPI_Barrier(comm);
  }

  RunAxes axes;
  axes.param_names = table.names;
  axes.param_meanings = table.meanings;
  axes.swept = table.swept;
  axes.region_sizes = c.bounds.regions;
  axes.local_dims = c.bounds.local_dims;
  axes.hist_bins = c.spectrum.summary.bins;
  axes.bulk_limit = c.spectrum.bulk_limit;
  RunMeta meta;
  meta.toral_version = TORAL_VERSION;
  meta.config_text = c.text;
  meta.config_source = c.source;
  meta.created = iso8601_utc_now();
  meta.ranks = size;
  for (const auto& s : c.sweeps) meta.sweep_names.push_back(s.name);
  write_results(comm, o.output, o.overwrite, axes, meta, total, local);

  RunOutcome out;
  out.points = total;
  long long bad_local = 0;
  for (const auto& r : local) bad_local += r.status != 0;
  long long bad_all = 0;
  MPI_Allreduce(&bad_local, &bad_all, 1, MPI_LONG_LONG, MPI_SUM, comm);
  out.failed = bad_all;
  out.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  print_run_summary(comm, c, table, local, out.points, out.seconds, o.output);
  return out;
}

}  // namespace toral
