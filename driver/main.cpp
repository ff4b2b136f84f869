// toral: command-line entry point. Subcommands: run, check, point.
#include <mpi.h>

#include <slepcsys.h>

#include <CLI/CLI.hpp>
#include <cstdio>
#include <fstream>
#include <iostream>
#include <sstream>

#include "compute.hpp"
#include "config.hpp"
#include "default_config.hpp"
#include "jobscript.hpp"
#include "merge.hpp"
#include "report.hpp"
#include "result_file.hpp"
#include "run.hpp"
#include "sweep.hpp"

extern "C" void openblas_set_num_threads(int) __attribute__((weak));

namespace {

constexpr int kExitOk = 0, kExitFailure = 1, kExitBadInput = 2;

// Reads the config on rank 0 and shares its text, so every rank parses the
// same bytes. An empty path means the embedded default sweep.
toral::Config load_everywhere(MPI_Comm comm, const std::string& path) {
  int rank = 0;
  MPI_Comm_rank(comm, &rank);
  std::string text, error;
  if (rank == 0) {
    if (path.empty()) {
      text = toral::kDefaultConfigText;
    } else {
      std::ifstream in(path, std::ios::binary);
      if (!in) {
        error = path + ": cannot read the config file";
      } else {
        std::ostringstream ss;
        ss << in.rdbuf();
        text = ss.str();
      }
    }
  }
  auto share = [&](std::string& s) {
    long long n = static_cast<long long>(s.size());
    MPI_Bcast(&n, 1, MPI_LONG_LONG, 0, comm);
    s.resize(static_cast<std::size_t>(n));
    if (n) MPI_Bcast(s.data(), static_cast<int>(n), MPI_CHAR, 0, comm);
  };
  share(error);
  if (!error.empty()) throw toral::ConfigError(error);
  share(text);
  return toral::parse_config(text, path.empty() ? "embedded default" : path);
}

void write_matrix_market(const std::string& path, const toral::SparseInt& m) {
  std::ofstream out(path);
  if (!out) throw std::runtime_error(path + ": cannot write the matrix file");
  out << "%%MatrixMarket matrix coordinate integer general\n";
  out << "% toral one-period matrix, coordinates (q_0..q_{L-1}, p_0..p_{L-1})\n";
  out << m.n << ' ' << m.n << ' ' << m.nnz() << '\n';
  for (std::int64_t i = 0; i < m.n; ++i)
    for (std::int64_t k = m.rowptr[i]; k < m.rowptr[i + 1]; ++k)
      out << i + 1 << ' ' << m.col[k] + 1 << ' ' << m.val[k] << '\n';
  if (!out) throw std::runtime_error(path + ": write failed");
}

// "--shard i/n" -> (i, n); ConfigError for anything else.
std::pair<std::int64_t, std::int64_t> parse_shard(const std::string& s) {
  const auto slash = s.find('/');
  try {
    if (slash != std::string::npos) {
      std::size_t a = 0, b = 0;
      const long long i = std::stoll(s.substr(0, slash), &a), n = std::stoll(s.substr(slash + 1), &b);
      if (a == slash && b == s.size() - slash - 1 && n >= 1 && i >= 0 && i < n) return {i, n};
    }
  } catch (const std::exception&) {
  }
  throw toral::ConfigError("--shard: \"" + s + "\" is not i/n with 0 <= i < n");
}

}  // namespace

int main(int argc, char** argv) {
  int provided = 0;
  // Distributed points run their collectives in a compute thread while the
  // main thread serves the task farm: MPI_THREAD_MULTIPLE.
  MPI_Init_thread(&argc, &argv, MPI_THREAD_MULTIPLE, &provided);
  // Everything after "--" goes to PETSc/SLEPc's options database
  // (-eps_*, -st_*, -toral_*, -log_view ...); the rest to toral's own parser.
  int cli_argc = argc;
  std::vector<char*> petsc_argv = {argv[0]};
  for (int i = 1; i < argc; ++i)
    if (std::string(argv[i]) == "--") {
      cli_argc = i;
      for (int j = i + 1; j < argc; ++j) petsc_argv.push_back(argv[j]);
      break;
    }
  int petsc_argc = static_cast<int>(petsc_argv.size());
  petsc_argv.push_back(nullptr);
  char** petsc_args = petsc_argv.data();
  if (SlepcInitialize(&petsc_argc, &petsc_args, nullptr, nullptr) != 0) {
    std::fprintf(stderr, "toral: error: PETSc/SLEPc initialisation failed\n");
    MPI_Finalize();
    return 1;
  }
  argc = cli_argc;
  if (openblas_set_num_threads) openblas_set_num_threads(1);  // one BLAS thread per rank
  int rank = 0;
  MPI_Comm_rank(MPI_COMM_WORLD, &rank);
  const MPI_Comm comm = MPI_COMM_WORLD;

  CLI::App app{"toral: Lyapunov spectra and entanglement-growth bounds of integer symplectic lattice maps\n"
               "PETSc/SLEPc options (e.g. -toral_eps_monitor, -log_view) go after `--`."};
  app.set_version_flag("--version", std::string("toral ") + TORAL_VERSION);
  app.require_subcommand(1);

  std::string config_path, output, matrix_path, script_path, shard;
  bool overwrite = false, quiet = false, json = false, block = false, resume = false;
  long long index = 0;
  double checkpoint = 60.0, progress_every = -1.0, memory_gb = 4.0;
  std::vector<std::string> merge_inputs;
  toral::JobscriptOptions js;

  auto* run = app.add_subcommand("run", "Run a sweep (the embedded default when no CONFIG is given) into an HDF5 file");
  run->add_option("config", config_path, "TOML sweep configuration");
  run->add_option("-o,--output", output, "HDF5 result file to create")->required();
  run->add_flag("--overwrite", overwrite, "Replace an existing result file (only once the new one is complete)");
  run->add_flag("-q,--quiet", quiet, "No progress lines");
  run->add_flag("--resume", resume,
                "Finish an interrupted run into the same file (its journal or checkpoint); starts afresh if neither exists");
  run->add_option("--shard", shard, "Run only the points with index % n == i, into their own file (i/n, 0 <= i < n)");
  run->add_option("--checkpoint", checkpoint, "Seconds between checkpoints of the result file (default 60)");
  run->add_option("--progress-every", progress_every,
                  "Seconds between progress lines (default: 0.5 on a terminal, 30 in batch logs)");

  auto* check = app.add_subcommand("check", "Validate a configuration, count its points, estimate the cost");
  check->add_option("config", config_path, "TOML sweep configuration")->required();
  check->add_option("--memory-per-rank", memory_gb, "Memory per rank in GiB; refuse points that need more (default 4)");

  auto* merge = app.add_subcommand("merge", "Combine the shard files of one run into one result file");
  merge->add_option("output", output, "Result file to create")->required();
  merge->add_option("shards", merge_inputs, "Shard files (from run --shard i/n)")->required();
  merge->add_flag("--overwrite", overwrite, "Replace an existing output file");

  auto* job = app.add_subcommand("jobscript", "Write a batch script (Slurm or PBS) that runs a config with resume and requeue");
  job->add_option("config", js.config, "TOML sweep configuration (as the job will see it)")->required();
  job->add_option("-o,--output", js.output, "Result file of the job")->required();
  job->add_option("--scheduler", js.scheduler, "slurm (default) or pbs");
  job->add_option("--ranks", js.ranks, "MPI ranks (default 16)");
  job->add_option("--walltime", js.walltime, "[D-]HH:MM:SS (default 01:00:00)");
  job->add_option("--partition,--queue", js.partition, "Slurm partition / PBS queue");
  job->add_option("--account", js.account, "Account to charge");
  job->add_option("--job-name", js.job_name, "Job name (default toral)");
  job->add_option("--shards", js.shards, "Array job of this many shards (default 1: no array)");
  job->add_option("--signal-lead", js.signal_lead, "Seconds before the walltime to stop and checkpoint (default 300)");
  job->add_option("--checkpoint", js.checkpoint, "Seconds between checkpoints (default 300)");
  job->add_option("--toral", js.toral, "Path of the toral binary on the cluster (default: toral on PATH)");
  job->add_option("--script", script_path, "Write the script to this file instead of standard output");

  auto* point = app.add_subcommand("point", "Compute one point and print it");
  point->add_option("config", config_path, "TOML sweep configuration ('-' for the embedded default)")->required();
  point->add_option("-i,--index", index, "Global point index (0-based, in sweep order)");
  point->add_flag("--json", json, "JSON keyed by the HDF5 dataset paths");
  point->add_option("--matrix", matrix_path, "Also write the point's integer matrix in Matrix Market format");
  point->add_flag("--position-block", block, "With --matrix: write the L x L block M (position-class circuits)");

  int code = kExitOk;
  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    const int c = rank == 0 ? app.exit(e) : e.get_exit_code();
    SlepcFinalize();
    MPI_Finalize();
    return c == 0 ? kExitOk : kExitBadInput;
  }

  try {
    if (*run) {
      const toral::Config cfg = load_everywhere(comm, config_path);
      toral::RunOptions o;
      o.output = output;
      o.overwrite = overwrite;
      o.quiet = quiet;
      o.resume = resume;
      o.checkpoint_seconds = checkpoint;
      o.progress_seconds = progress_every;
      if (!shard.empty()) std::tie(o.shard_index, o.shard_count) = parse_shard(shard);
      // before any computation; a resumed run replaces its own checkpoint
      toral::check_output_target(comm, output, overwrite || resume);
      const auto outcome = toral::run_sweep(comm, cfg, o);
      if (rank == 0 && outcome.failed > 0)
        std::fprintf(stderr, "toral: warning: %lld of %lld points failed or are inaccurate (status != 0); see /points/status and /points/message\n",
                     static_cast<long long>(outcome.failed), static_cast<long long>(outcome.points));
    } else if (*check) {
      const toral::Config cfg = load_everywhere(comm, config_path);
      if (rank == 0) toral::print_check(std::cout, cfg, memory_gb);
    } else if (*merge) {
      if (rank == 0) toral::merge_results(merge_inputs, output, overwrite);  // serial
    } else if (*job) {
      if (rank == 0) {
        const std::string text = toral::make_jobscript(js);
        if (script_path.empty()) {
          std::cout << text;
        } else {
          std::ofstream f(script_path);
          if (!(f << text)) throw toral::ConfigError(script_path + ": cannot write the script");
        }
      }
    } else if (*point) {
      const toral::Config cfg = load_everywhere(comm, config_path == "-" ? "" : config_path);
      const auto n = toral::point_count(cfg);
      if (index < 0 || index >= n)
        throw toral::ConfigError("--index " + std::to_string(index) + ": out of range, the config has " +
                                 std::to_string(n) + " points (0.." + std::to_string(n - 1) + ")");
      if (rank == 0) {
        const auto points = toral::expand(cfg);
        const auto& p = points[static_cast<std::size_t>(index)];
        const toral::ParamTable t = toral::param_table(cfg);
        if (!matrix_path.empty()) {
          const toral::Circuit c = toral::build_circuit(cfg, p);
          if (block && !c.position_class())
            throw toral::ConfigError("--position-block: point " + std::to_string(index) + " is not position-class");
          write_matrix_market(matrix_path, block ? toral::assemble_position_block(c) : toral::assemble_period(c));
        }
        toral::print_point(std::cout, cfg, t, p, toral::compute_point(cfg, t, p), json);
      }
    }
  } catch (const toral::ConfigError& e) {
    if (rank == 0) std::fprintf(stderr, "toral: error: %s\n", e.what());
    code = kExitBadInput;
  } catch (const toral::ResultFileError& e) {
    if (rank == 0) std::fprintf(stderr, "toral: error: %s\n", e.what());
    code = kExitBadInput;
  } catch (const std::exception& e) {
    std::fprintf(stderr, "toral: error (rank %d): %s\n", rank, e.what());
    code = kExitFailure;
  }
  SlepcFinalize();
  MPI_Finalize();
  return code;
}
