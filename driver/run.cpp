#include "run.hpp"

#include <unistd.h>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <csignal>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <future>
#include <map>
#include <thread>

#include "compute.hpp"
#include "ensemble.hpp"
#include "journal.hpp"
#include "report.hpp"
#include "result_file.hpp"
#include "sweep.hpp"

namespace toral {

namespace {

volatile std::sig_atomic_t g_stop_signal = 0;
extern "C" void on_stop_signal(int sig) { g_stop_signal = sig; }
bool stop_requested() { return g_stop_signal != 0; }

// A worker that got a stop signal abandons its point and gives rank 0 time to
// write the checkpoint (rank 0's exit then ends the job); it leaves by itself
// after 9 s in case rank 0 was not signalled.
[[noreturn]] void stop_worker() {
  std::this_thread::sleep_for(std::chrono::seconds(9));
  std::_Exit(kExitInterrupted);
}

using Clock = std::chrono::steady_clock;
double since(Clock::time_point t0) { return std::chrono::duration<double>(Clock::now() - t0).count(); }

// Message tags of the task farm.
constexpr int kTagRequest = 11;  // worker -> 0: first request for work (empty)
constexpr int kTagRecord = 12;   // worker -> 0: a finished record (also asks for more)
constexpr int kTagWork = 13;     // 0 -> worker: a point index, or -1 to stop
// The same for rank groups (distributed points), spoken by group leaders.
constexpr int kTagGroupRequest = 21, kTagGroupRecord = 22, kTagGroupWork = 23;

// Waits for a non-blocking operation while watching for stop signals.
void wait_watching(MPI_Request& req, void (*on_stop)()) {
  int done = 0;
  while (!done) {
    MPI_Test(&req, &done, MPI_STATUS_IGNORE);
    if (!done) {
      if (stop_requested()) on_stop();
      std::this_thread::sleep_for(std::chrono::milliseconds(1));
    }
  }
}

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

// Rank 0's progress line: one updating line on a terminal, plain lines in logs.
class Progress {
 public:
  Progress(bool quiet, double every, std::int64_t total, std::int64_t already)
      : quiet_(quiet), tty_(isatty(STDERR_FILENO) == 1), total_(total), already_(already) {
    every_ = every >= 0 ? every : (tty_ ? 0.5 : 30.0);
  }
  void update(std::int64_t done, std::int64_t failed, bool final = false) {
    if (quiet_) return;
    const double el = since(t0_);
    if (!final && el - last_ < every_) return;
    last_ = el;
    const std::int64_t now = done - already_;
    const double rate = now / std::max(el, 1e-9);
    const double eta = rate > 0 ? (total_ - done) / rate : INFINITY;
    std::fprintf(stderr, "%storal: %lld/%lld points, %lld failed, %.2f points/s, %s %s%s",
                 tty_ ? "\r" : "", static_cast<long long>(done), static_cast<long long>(total_),
                 static_cast<long long>(failed), rate, final ? "elapsed" : "ETA",
                 fmt_seconds(final ? el : eta).c_str(), tty_ && !final ? "   " : "\n");
    std::fflush(stderr);
  }

 private:
  bool quiet_, tty_;
  std::int64_t total_, already_;
  double every_ = 30, last_ = -1e9;
  Clock::time_point t0_ = Clock::now();
};

// A placeholder row for a point not computed yet.
PointRecord pending_record(const Config& c, const ParamTable& t, const Point& p) {
  PointRecord r;
  r.index = p.index;
  r.params = param_values(c, t, p);
  r.status = static_cast<std::int32_t>(PointStatus::Pending);
  r.message = "pending: not computed yet";
  return r;
}

// Everything rank 0 needs to write the result file (final or checkpoint).
struct FileParts {
  RunAxes axes;
  RunMeta meta;
};

FileParts file_parts(const Config& c, const ParamTable& table, std::int64_t ranks, const RunOptions& o) {
  FileParts f;
  f.axes.param_names = table.names;
  f.axes.param_meanings = table.meanings;
  f.axes.swept = table.swept;
  f.axes.region_sizes = c.bounds.regions;
  f.axes.local_dims = c.bounds.local_dims;
  f.axes.hist_bins = c.spectrum.summary.bins;
  f.axes.bulk_limit = c.spectrum.bulk_limit;
  f.axes.schema = run_schema(c);  // the diagnostics' declarations (driver/diagnostics.cpp)
  f.meta.toral_version = TORAL_VERSION;
  f.meta.config_text = c.text;
  f.meta.config_source = c.source;
  f.meta.created = iso8601_utc_now();
  f.meta.ranks = ranks;
  for (const auto& s : c.sweeps) f.meta.sweep_names.push_back(s.name);
  f.meta.config_hash = config_hash(c);
  f.meta.total_points = point_count(c);
  if (o.shard_count > 1) f.meta.shard = std::to_string(o.shard_index) + "/" + std::to_string(o.shard_count);
  return f;
}

// Gives each record its row in this run's file (the position of its index in `mine`).
void assign_rows(std::vector<PointRecord>& recs, const std::map<std::int64_t, std::int64_t>& row_of) {
  for (auto& r : recs) r.row = row_of.at(r.index);
}

// Shares rank 0's verdict: an empty string means go on; else every rank throws.
void agree_or_throw(MPI_Comm comm, std::string verdict) {
  long long n = static_cast<long long>(verdict.size());
  MPI_Bcast(&n, 1, MPI_LONG_LONG, 0, comm);
  verdict.resize(static_cast<std::size_t>(n));
  if (n) MPI_Bcast(verdict.data(), static_cast<int>(n), MPI_CHAR, 0, comm);
  if (!verdict.empty()) throw ConfigError(verdict);
}

void send_bytes(const std::string& s, int dest, int tag, MPI_Comm comm) {
  MPI_Send(s.data(), static_cast<int>(s.size()), MPI_BYTE, dest, tag, comm);
}

std::string recv_bytes(const MPI_Status& st, MPI_Comm comm) {
  int n = 0;
  MPI_Get_count(&st, MPI_BYTE, &n);
  std::string s(static_cast<std::size_t>(n), '\0');
  MPI_Recv(s.data(), n, MPI_BYTE, st.MPI_SOURCE, st.MPI_TAG, comm, MPI_STATUS_IGNORE);
  return s;
}

// ---- The parts of run_sweep, in the order it calls them.

// What this run is, the same on every rank: its points, the rows of this
// run's file, the file's axes and metadata, the journal's path.
struct RunSetup {
  int rank = 0, size = 1;
  ParamTable table;
  std::vector<Point> points;
  std::vector<std::int64_t> mine;  // this run's points (a shard: index % n == i)
  std::map<std::int64_t, std::int64_t> row_of;
  FileParts parts;
  std::string jpath;
};

RunSetup run_setup(MPI_Comm comm, const Config& c, const RunOptions& o) {
  RunSetup s;
  MPI_Comm_rank(comm, &s.rank);
  MPI_Comm_size(comm, &s.size);
  s.table = param_table(c);
  s.points = expand(c);
  for (const auto& p : s.points)
    if (p.index % o.shard_count == o.shard_index) s.mine.push_back(p.index);
  for (std::size_t r = 0; r < s.mine.size(); ++r) s.row_of[s.mine[r]] = static_cast<std::int64_t>(r);
  s.parts = file_parts(c, s.table, s.size, o);
  s.jpath = journal_path(o.output);
  return s;
}

// ---- (1) resume state: what is already done (journal or an earlier file)

struct ResumeState {
  std::vector<PointRecord> done;  // rank 0 only: records from before this run
  bool from_journal = false;
};

// Rank 0: reads the journal (--resume with a journal) or the finished rows of
// an earlier file (--resume without one) into `st`, and returns why the run
// is refused (config or schema hash, shard, a stray journal), or "".
std::string read_earlier(const RunSetup& s, const RunOptions& o, ResumeState& st) {
  const FileParts& parts = s.parts;
  const std::string& jpath = s.jpath;
  std::vector<PointRecord>& done = st.done;
  std::string verdict;
  const bool have_journal = std::filesystem::exists(jpath);
  if (o.resume && have_journal) {
    JournalContents j = read_journal(jpath);
    if (j.config_hash != parts.meta.config_hash)
      verdict = jpath + ": --resume refused: the journal was written by a different config (hash " +
                j.config_hash + ", this config " + parts.meta.config_hash + ")";
    else if (j.schema_hash != parts.axes.schema.hash())
      verdict = jpath + ": --resume refused: the journal holds diagnostics of another schema (hash " +
                j.schema_hash + ", this toral and config " + parts.axes.schema.hash() + ")";
    else
      done = std::move(j.records), st.from_journal = true;
  } else if (o.resume && output_exists(o.output)) {
    ResultData d = read_results(o.output);
    if (d.meta.config_hash != parts.meta.config_hash)
      verdict = o.output + ": --resume refused: the file was written by a different config (hash " +
                d.meta.config_hash + ", this config " + parts.meta.config_hash + ")";
    else if (d.axes.schema.hash() != parts.axes.schema.hash())
      verdict = o.output + ": --resume refused: the file holds diagnostics of another schema (hash " +
                d.axes.schema.hash() + ", this toral and config " + parts.axes.schema.hash() + ")";
    else if (d.meta.shard != parts.meta.shard)
      verdict = o.output + ": --resume refused: the file holds shard \"" + d.meta.shard +
                "\", this run is shard \"" + parts.meta.shard + "\"";
    for (auto& r : d.records)
      if (r.status != static_cast<std::int32_t>(PointStatus::Pending)) done.push_back(std::move(r));
  } else if (!o.resume && have_journal && !o.overwrite) {
    verdict = jpath + ": an interrupted run left this journal; pass --resume to finish it or --overwrite to start over";
  }
  return verdict;
}

// Keeps only this run's points, once each.
void keep_this_runs_points(std::vector<PointRecord>& done, const RunSetup& s) {
  std::vector<PointRecord> kept;
  std::vector<char> seen(s.points.size(), 0);
  for (auto& r : done)
    if (r.index >= 0 && r.index < static_cast<std::int64_t>(s.points.size()) && s.row_of.count(r.index) &&
        !seen[static_cast<std::size_t>(r.index)]) {
      seen[static_cast<std::size_t>(r.index)] = 1;
      kept.push_back(std::move(r));
    }
  done = std::move(kept);
}

// Collective: rank 0 reads what is already done; a refusal or a read failure
// becomes a ConfigError on every rank.
ResumeState resume_state(MPI_Comm comm, const RunSetup& s, const RunOptions& o) {
  ResumeState st;
  std::string verdict;
  if (s.rank == 0) {
    try {
      verdict = read_earlier(s, o, st);
      keep_this_runs_points(st.done, s);
    } catch (const std::exception& e) {
      verdict = e.what();
    }
  }
  agree_or_throw(comm, verdict);
  return st;
}

// ---- (2) group planning: which points are distributed, and the rank groups

struct Groups {
  bool phase = false;  // a distributed phase runs before the single-rank points
  int size = 1, count = 1, rank = 0;
  MPI_Comm comm = MPI_COMM_NULL;
};

struct GroupPlan {
  std::vector<char> distributed;  // by point index: this run's points that run on a rank group
  Groups groups;
};

// Collective (MPI_Comm_split when any point is distributed).
GroupPlan plan_groups(MPI_Comm comm, const Config& c, const RunSetup& s) {
  // Distributed points (krylov, tangent, or a diagnostic that asks for
  // several ranks) run on rank groups of consecutive ranks; the decision is
  // made from the config alone, the same everywhere.
  GroupPlan g;
  g.distributed.assign(s.points.size(), 0);
  bool any_distributed = false;
  for (std::int64_t i : s.mine) {
    const Point& pt = s.points[static_cast<std::size_t>(i)];
    g.distributed[static_cast<std::size_t>(i)] = distributed_method(planned_method(c, pt)) || diagnostic_ranks(c, pt) > 1;
    any_distributed = any_distributed || g.distributed[static_cast<std::size_t>(i)];
  }
  Groups& groups = g.groups;
  if (any_distributed) {
    groups.phase = true;
    groups.size = ranks_per_point(c, s.points, s.size);
    groups.count = (s.size + groups.size - 1) / groups.size;
    MPI_Comm_split(comm, s.rank / groups.size, s.rank, &groups.comm);
    MPI_Comm_rank(groups.comm, &groups.rank);
  }
  return g;
}

// ---- (3) the work farm: rank 0 coordinates (and computes), the others work

// Rank 0's points still to compute, single-rank and distributed, each list
// largest estimated cost first.
struct Todo {
  std::vector<std::int64_t> single, group;
};

Todo plan_todo(const Config& c, const RunSetup& s, const GroupPlan& g, const ResumeState& resume) {
  Todo t;
  std::vector<char> is_done(s.points.size(), 0);
  for (const auto& r : resume.done) is_done[static_cast<std::size_t>(r.index)] = 1;
  for (std::int64_t i : s.mine)
    if (!is_done[static_cast<std::size_t>(i)])
      (g.distributed[static_cast<std::size_t>(i)] ? t.group : t.single).push_back(i);
  std::vector<double> cost(s.points.size(), 0.0);
  for (auto* list : {&t.single, &t.group}) {
    for (std::int64_t i : *list) cost[static_cast<std::size_t>(i)] = estimated_flops(c, s.points[static_cast<std::size_t>(i)]);
    std::stable_sort(list->begin(), list->end(), [&](std::int64_t a, std::int64_t b) {
      return cost[static_cast<std::size_t>(a)] > cost[static_cast<std::size_t>(b)];
    });
  }
  return t;
}

// Rank 0's journal: appended to when resuming from it, else a new one.
JournalWriter open_journal(const RunSetup& s, const ResumeState& resume) {
  JournalWriter journal;
  if (resume.from_journal)
    journal.open_append(s.jpath);
  else
    journal.open_new(s.jpath, s.parts.meta.config_hash, s.parts.meta.total_points, s.parts.axes.schema.hash());
  return journal;
}

// What the coordinator ends with.
struct FarmTally {
  std::vector<PointRecord> all;  // every finished record of this run
  std::int64_t failed = 0;
};

// Rank 0's main thread: hands out points (distributed ones first, to group
// leaders), computes points itself in a second thread, journals every
// finished record, writes checkpoints and progress, and on a stop signal
// writes a checkpoint and exits with kExitInterrupted. Appends the records it
// computed to `local`.
class Coordinator {
 public:
  Coordinator(MPI_Comm comm, const Config& c, const RunOptions& o, const RunSetup& s, const GroupPlan& plan,
              const ResumeState& resume, JournalWriter& journal, std::vector<PointRecord>& local)
      : comm_(comm), c_(c), o_(o), s_(s), groups_(plan.groups), journal_(journal), local_(local),
        todo_(plan_todo(c, s, plan, resume)), total_(static_cast<std::int64_t>(s.mine.size())),
        active_workers_(s.size - 1), active_leaders_(plan.groups.phase ? plan.groups.count - 1 : 0),
        own_group_open_(plan.groups.phase) {
    tally_.all = resume.done;
    for (const auto& r : tally_.all) tally_.failed += r.status != 0;
  }

  FarmTally run() {
    Progress progress(o_.quiet, o_.progress_seconds, total_, static_cast<std::int64_t>(tally_.all.size()));
    auto last_checkpoint = Clock::now();
    while (true) {
      if (stop_requested()) stop();
      bool busy = start_own_point();
      busy = collect_own_point() || busy;
      busy = serve_message() || busy;
      progress.update(static_cast<std::int64_t>(tally_.all.size()), tally_.failed);
      if (finished()) break;
      if (o_.checkpoint_seconds >= 0 && since(last_checkpoint) >= o_.checkpoint_seconds &&
          (next_ < todo_.single.size() || next_group_ < todo_.group.size())) {
        checkpoint();
        last_checkpoint = Clock::now();
      }
      if (!busy) {
        if (mine_now_.valid())
          mine_now_.wait_for(std::chrono::milliseconds(1));
        else
          std::this_thread::sleep_for(std::chrono::milliseconds(1));
      }
    }
    progress.update(static_cast<std::int64_t>(tally_.all.size()), tally_.failed, true);
    journal_.sync();
    return std::move(tally_);
  }

 private:
  // Stop handing out work; the journal has every finished point.
  [[noreturn]] void stop() {
    checkpoint();
    journal_.close();
    std::fprintf(stderr, "\ntoral: stopped by signal %d: %lld of %lld points done; checkpoint in %s, resume with --resume\n",
                 static_cast<int>(g_stop_signal), static_cast<long long>(tally_.all.size()),
                 static_cast<long long>(total_), o_.output.c_str());
    std::fflush(stderr);
    std::_Exit(kExitInterrupted);
  }

  // The result file from what is finished, the rest pending.
  void checkpoint() {
    std::vector<PointRecord> recs = tally_.all;
    std::vector<char> have(s_.points.size(), 0);
    for (const auto& r : recs) have[static_cast<std::size_t>(r.index)] = 1;
    for (std::int64_t i : s_.mine)
      if (!have[static_cast<std::size_t>(i)])
        recs.push_back(pending_record(c_, s_.table, s_.points[static_cast<std::size_t>(i)]));
    assign_rows(recs, s_.row_of);
    journal_.sync();
    write_results(MPI_COMM_SELF, o_.output, true, s_.parts.axes, s_.parts.meta, total_, recs);
  }

  // Every finished record goes to the journal before anything else happens to it.
  void commit(PointRecord&& r) {
    journal_.append(r);
    tally_.failed += r.status != 0;
    tally_.all.push_back(std::move(r));
  }

  void launch(std::int64_t index, MPI_Comm on) {
    const Point& p = s_.points[static_cast<std::size_t>(index)];
    const Config& c = c_;
    const ParamTable& table = s_.table;
    mine_now_ = std::async(std::launch::async, [&c, &table, &p, on] { return compute_point(c, table, p, on); });
  }

  // When this rank's compute thread is free: the next distributed point for
  // rank group 0, or group 0's release, or the next single point. True when
  // a point was started.
  bool start_own_point() {
    if (mine_now_.valid()) return false;
    if (own_group_open_ && next_group_ < todo_.group.size()) {
      // a distributed point for rank group 0 (this rank leads it)
      long long w = todo_.group[next_group_++];
      MPI_Request req;
      MPI_Ibcast(&w, 1, MPI_LONG_LONG, 0, groups_.comm, &req);
      MPI_Wait(&req, MPI_STATUS_IGNORE);
      launch(w, groups_.comm);
      return true;
    } else if (own_group_open_) {
      // no distributed point left to hand out: release group 0 to the single points
      long long w = -1;
      MPI_Request req;
      MPI_Ibcast(&w, 1, MPI_LONG_LONG, 0, groups_.comm, &req);
      MPI_Wait(&req, MPI_STATUS_IGNORE);
      own_group_open_ = false;
    } else if (!own_group_open_ && next_ < todo_.single.size()) {
      launch(todo_.single[next_++], MPI_COMM_SELF);
      return true;
    }
    return false;
  }

  // Nothing left to hand out or to compute here, and every worker and other
  // group leader has been told to stop.
  bool finished() const {
    return next_ >= todo_.single.size() && !mine_now_.valid() && active_workers_ == 0 && active_leaders_ == 0 &&
           !own_group_open_;
  }

  // A finished point of this rank's compute thread. True when there was one.
  bool collect_own_point() {
    if (mine_now_.valid() && mine_now_.wait_for(std::chrono::milliseconds(0)) == std::future_status::ready) {
      PointRecord r = mine_now_.get();
      local_.push_back(r);
      commit(std::move(r));
      return true;
    }
    return false;
  }

  // One message from a worker or a group leader: a request (or a finished
  // record, which is also a request) answered with the next point of its
  // kind, or -1 when none is left. True when there was one.
  bool serve_message() {
    int flag = 0;
    MPI_Status st;
    MPI_Iprobe(MPI_ANY_SOURCE, MPI_ANY_TAG, comm_, &flag, &st);
    if (!flag) return false;
    const bool group_msg = st.MPI_TAG == kTagGroupRequest || st.MPI_TAG == kTagGroupRecord;
    if (st.MPI_TAG == kTagRecord || st.MPI_TAG == kTagGroupRecord)
      commit(decode_record(recv_bytes(st, comm_)));
    else
      MPI_Recv(nullptr, 0, MPI_BYTE, st.MPI_SOURCE, st.MPI_TAG, comm_, MPI_STATUS_IGNORE);
    long long work = -1;
    if (group_msg) {
      if (next_group_ < todo_.group.size()) work = todo_.group[next_group_++];
      else --active_leaders_;
      MPI_Send(&work, 1, MPI_LONG_LONG, st.MPI_SOURCE, kTagGroupWork, comm_);
    } else {
      if (next_ < todo_.single.size()) work = todo_.single[next_++];
      else --active_workers_;
      MPI_Send(&work, 1, MPI_LONG_LONG, st.MPI_SOURCE, kTagWork, comm_);
    }
    return true;
  }

  MPI_Comm comm_;
  const Config& c_;
  const RunOptions& o_;
  const RunSetup& s_;
  const Groups& groups_;
  JournalWriter& journal_;
  std::vector<PointRecord>& local_;
  const Todo todo_;
  const std::int64_t total_;
  FarmTally tally_;
  std::size_t next_ = 0, next_group_ = 0;
  int active_workers_;    // ranks that will still ask for single points
  int active_leaders_;    // other groups' leaders
  bool own_group_open_;   // group 0 still waits for distributed points
  std::future<PointRecord> mine_now_;
};

// A worker's distributed phase, as the leader or a member of its rank group:
// the leader asks rank 0 for a point and broadcasts it to the group, which
// computes it together; -1 ends the phase.
void work_distributed(MPI_Comm comm, const Config& c, const RunSetup& s, const Groups& groups,
                      std::vector<PointRecord>& local) {
  const bool leader = groups.rank == 0;
  if (leader) MPI_Send(nullptr, 0, MPI_BYTE, 0, kTagGroupRequest, comm);
  while (true) {
    long long work = -1;
    MPI_Request req;
    if (leader) {
      MPI_Irecv(&work, 1, MPI_LONG_LONG, 0, kTagGroupWork, comm, &req);
      wait_watching(req, stop_worker);
    }
    MPI_Ibcast(&work, 1, MPI_LONG_LONG, 0, groups.comm, &req);
    wait_watching(req, stop_worker);
    if (work < 0) break;
    const Point& p = s.points[static_cast<std::size_t>(work)];
    const MPI_Comm gc = groups.comm;
    auto fut = std::async(std::launch::async, [&c, &s, &p, gc] { return compute_point(c, s.table, p, gc); });
    while (fut.wait_for(std::chrono::milliseconds(20)) != std::future_status::ready)
      if (stop_requested()) stop_worker();
    PointRecord r = fut.get();
    if (leader) {
      send_bytes(encode_record(r), 0, kTagGroupRecord, comm);
      local.push_back(std::move(r));
    }
  }
}

// A worker's single-rank points: one at a time from rank 0 (a finished
// record is also the next request); -1 ends.
void work_single(MPI_Comm comm, const Config& c, const RunSetup& s, std::vector<PointRecord>& local) {
  MPI_Send(nullptr, 0, MPI_BYTE, 0, kTagRequest, comm);
  while (true) {
    long long work = -1;
    MPI_Request req;
    MPI_Irecv(&work, 1, MPI_LONG_LONG, 0, kTagWork, comm, &req);
    int got = 0;
    while (!got) {
      MPI_Test(&req, &got, MPI_STATUS_IGNORE);
      if (stop_requested()) stop_worker();
      if (!got) std::this_thread::sleep_for(std::chrono::milliseconds(1));
    }
    if (work < 0) break;
    const Point& p = s.points[static_cast<std::size_t>(work)];
    auto fut = std::async(std::launch::async, [&c, &s, &p] { return compute_point(c, s.table, p); });
    while (fut.wait_for(std::chrono::milliseconds(20)) != std::future_status::ready)
      if (stop_requested()) stop_worker();
    PointRecord r = fut.get();
    send_bytes(encode_record(r), 0, kTagRecord, comm);
    local.push_back(std::move(r));
  }
}

// ---- (4) the final write: collective, each rank its own rows

// Rank 0: its own records and the earlier ones, the ensemble statistics of
// all; the journal is removed once the file is complete.
void write_final_coordinator(MPI_Comm comm, const RunOptions& o, const RunSetup& s, const ResumeState& resume,
                             const FarmTally& tally, JournalWriter& journal, std::vector<PointRecord>& local,
                             RunOutcome& out) {
  const std::vector<PointRecord>& done = resume.done;
  // rank 0 writes the earlier records too
  local.insert(local.end(), done.begin(), done.end());
  out.failed = tally.failed;
  out.computed = static_cast<std::int64_t>(tally.all.size() - done.size());
  assign_rows(local, s.row_of);
  const EnsembleStats stats = ensemble_stats(s.parts.axes, tally.all);
  journal.close();
  write_results(comm, o.output, true, s.parts.axes, s.parts.meta, out.points, local, &stats);
  std::error_code ec;
  std::filesystem::remove(s.jpath, ec);  // the final file is complete: the journal has served
}

void write_final_worker(MPI_Comm comm, const RunOptions& o, const RunSetup& s, std::vector<PointRecord>& local,
                        const RunOutcome& out) {
  assign_rows(local, s.row_of);
  write_results(comm, o.output, true, s.parts.axes, s.parts.meta, out.points, local, nullptr);
}

// Collective: every rank learns rank 0's counts; the summary of the run.
void finish_outcome(MPI_Comm comm, const Config& c, const RunSetup& s, const ResumeState& resume,
                    const std::vector<PointRecord>& local, Clock::time_point t0, const RunOptions& o,
                    RunOutcome& out) {
  long long counts[2] = {out.failed, out.computed};
  MPI_Bcast(counts, 2, MPI_LONG_LONG, 0, comm);
  out.failed = counts[0];
  out.computed = counts[1];
  out.seconds = since(t0);
  double busy = 0.0;
  for (const auto& r : local) busy += r.wall_time;
  if (s.rank == 0)
    for (const auto& r : resume.done) busy -= r.wall_time;  // computed before this run
  print_run_summary(comm, c, s.table, local, out.points, out.seconds, o.output, std::max(busy, 0.0));
}

}  // namespace

std::string config_hash(const Config& c) { return config_hash_of(c.text); }

void install_stop_handlers() {
  struct sigaction sa {};
  sa.sa_handler = on_stop_signal;
  sigemptyset(&sa.sa_mask);
  for (int s : {SIGTERM, SIGUSR1, SIGINT}) sigaction(s, &sa, nullptr);
}

RunOutcome run_sweep(MPI_Comm comm, const Config& c, const RunOptions& o) {
  const auto t0 = Clock::now();
  const RunSetup s = run_setup(comm, c, o);
  // ---- rank 0: what is already done (journal or an earlier file)
  const ResumeState resume = resume_state(comm, s, o);

  install_stop_handlers();
  GroupPlan plan = plan_groups(comm, c, s);
  std::vector<PointRecord> local;  // records this rank computed now
  RunOutcome out;
  out.points = static_cast<std::int64_t>(s.mine.size());

  if (s.rank == 0) {
    // ---- coordinator (and a computing rank itself)
    JournalWriter journal = open_journal(s, resume);
    const FarmTally tally = Coordinator(comm, c, o, s, plan, resume, journal, local).run();
    write_final_coordinator(comm, o, s, resume, tally, journal, local, out);
  } else {
    // ---- worker: first the distributed phase (as a group leader or member)
    if (plan.groups.phase) work_distributed(comm, c, s, plan.groups, local);
    work_single(comm, c, s, local);
    write_final_worker(comm, o, s, local, out);
  }

  if (plan.groups.comm != MPI_COMM_NULL) MPI_Comm_free(&plan.groups.comm);
  finish_outcome(comm, c, s, resume, local, t0, o, out);
  return out;
}

}  // namespace toral
