#include "jobscript.hpp"

#include <regex>
#include <sstream>

#include "config.hpp"

namespace toral {

std::int64_t walltime_seconds(const std::string& w) {
  static const std::regex re(R"(^(?:(\d+)-)?(\d{1,3}):([0-5]\d):([0-5]\d)$)");
  std::smatch m;
  if (!std::regex_match(w, m, re))
    throw ConfigError("--walltime: \"" + w + "\" is not [D-]HH:MM:SS");
  const std::int64_t d = m[1].matched ? std::stoll(m[1]) : 0;
  return ((d * 24 + std::stoll(m[2])) * 60 + std::stoll(m[3])) * 60 + std::stoll(m[4]);
}

std::string shell_quote(const std::string& s) {
  std::string o = "'";
  for (char ch : s) {
    if (ch == '\'')
      o += "'\\''";
    else
      o += ch;
  }
  return o + "'";
}

namespace {

void require_name(const std::string& value, const char* option, bool may_be_empty) {
  static const std::regex re(R"(^[A-Za-z0-9._-]+$)");
  if (value.empty() && may_be_empty) return;
  if (!std::regex_match(value, re))
    throw ConfigError(std::string(option) + ": \"" + value +
                      "\" may only contain letters, digits, '.', '_' and '-' (it goes into a scheduler directive)");
}

}  // namespace

std::string make_jobscript(const JobscriptOptions& o) {
  if (o.scheduler != "slurm" && o.scheduler != "pbs")
    throw ConfigError("--scheduler: \"" + o.scheduler + "\" is not slurm or pbs");
  require_name(o.job_name, "--job-name", false);
  require_name(o.partition, o.scheduler == "slurm" ? "--partition" : "--queue", true);
  require_name(o.account, "--account", true);
  if (o.ranks < 1) throw ConfigError("--ranks: must be at least 1");
  if (o.shards < 1) throw ConfigError("--shards: must be at least 1");
  if (o.config.empty()) throw ConfigError("jobscript: a config path is required");
  if (o.output.empty()) throw ConfigError("-o/--output: a result file is required");
  for (const auto* s : {&o.config, &o.output, &o.toral})
    if (s->find('\n') != std::string::npos || s->find('\0') != std::string::npos)
      throw ConfigError("jobscript: paths must not contain newlines");
  const std::int64_t wall = walltime_seconds(o.walltime);
  if (o.signal_lead < 10 || o.signal_lead >= wall)
    throw ConfigError("--signal-lead: " + std::to_string(o.signal_lead) +
                      " s must be at least 10 s and shorter than the walltime (" + std::to_string(wall) + " s)");
  if (!(o.checkpoint >= 0)) throw ConfigError("--checkpoint: must be >= 0 seconds");

  const bool slurm = o.scheduler == "slurm";
  const bool array = o.shards > 1;
  std::ostringstream s;
  s << "#!/bin/bash\n";
  s << "# Written by `toral jobscript` for " << (slurm ? "Slurm" : "PBS") << ".\n";
  s << "# SIGTERM " << o.signal_lead << " s before the walltime makes toral write a checkpoint and stop\n"
       "# (exit code 3); the journal next to the result file then marks the run as\n"
       "# unfinished and the job requeues itself, resuming where it stopped.\n";
  if (array)
    s << "# Array job: one shard per task. When all are done, combine them with\n#   "
      << o.toral << " merge " << o.output << " <the " << o.shards << " shard files>\n";
  if (slurm) {
    s << "#SBATCH --job-name=" << o.job_name << "\n";
    s << "#SBATCH --ntasks=" << o.ranks << "\n";
    s << "#SBATCH --cpus-per-task=1\n";
    s << "#SBATCH --time=" << o.walltime << "\n";
    if (!o.partition.empty()) s << "#SBATCH --partition=" << o.partition << "\n";
    if (!o.account.empty()) s << "#SBATCH --account=" << o.account << "\n";
    if (array) s << "#SBATCH --array=0-" << o.shards - 1 << "\n";
    s << "#SBATCH --signal=TERM@" << o.signal_lead << "\n";
    s << "#SBATCH --requeue\n";
    s << "#SBATCH --open-mode=append\n";
    s << "#SBATCH --output=" << o.job_name << (array ? "-%A_%a.log" : "-%j.log") << "\n";
  } else {
    s << "#PBS -N " << o.job_name << "\n";
    s << "#PBS -l select=" << o.ranks << ":ncpus=1:mpiprocs=1\n";
    s << "#PBS -l walltime=" << o.walltime << "\n";
    if (!o.partition.empty()) s << "#PBS -q " << o.partition << "\n";
    if (!o.account.empty()) s << "#PBS -A " << o.account << "\n";
    if (array) s << "#PBS -J 0-" << o.shards - 1 << "\n";
    s << "#PBS -r y\n";
    s << "#PBS -j oe\n";
  }
  s << "\nset -u\n";
  if (!slurm) s << "cd \"${PBS_O_WORKDIR:-.}\"\n";
  s << "toral=" << shell_quote(o.toral) << "\n";
  s << "config=" << shell_quote(o.config) << "\n";
  s << "output=" << shell_quote(o.output) << "\n";
  s << "export OMP_NUM_THREADS=1 OPENBLAS_NUM_THREADS=1\n";
  s << "shard=()\nout=\"$output\"\n";
  if (array) {
    const char* idx = slurm ? "SLURM_ARRAY_TASK_ID" : "PBS_ARRAY_INDEX";
    s << "i=\"${" << idx << ":?this script is an array job}\"\n";
    s << "shard=(--shard \"$i/" << o.shards << "\")\n";
    s << "out=\"${output%.h5}.shard${i}of" << o.shards << ".h5\"\n";
  }
  s << "\n\"$toral\" check \"$config\" || exit $?\n";
  char ck[32];
  std::snprintf(ck, sizeof ck, "%g", o.checkpoint);
  if (slurm) {
    s << "srun \"$toral\" run \"$config\" -o \"$out\" --resume --checkpoint " << ck << " \"${shard[@]}\"\n";
  } else {
    // PBS has no pre-walltime signal: a timer sends it.
    s << "timeout --signal=TERM --kill-after=60 " << wall - o.signal_lead << " mpiexec -n " << o.ranks
      << " \"$toral\" run \"$config\" -o \"$out\" --resume --checkpoint " << ck << " \"${shard[@]}\"\n";
  }
  s << "rc=$?\n";
  s << "if [ -e \"$out.journal\" ]; then\n";
  s << "  echo \"toral: unfinished (exit $rc); requeueing to resume\"\n";
  if (slurm)
    s << "  scontrol requeue \"$SLURM_JOB_ID\"\n";
  else
    s << "  qrerun \"$PBS_JOBID\"\n";
  s << "  exit 0\nfi\nexit $rc\n";
  return s.str();
}

}  // namespace toral
