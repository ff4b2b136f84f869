#!/bin/bash
# PBS Pro template for one toral sweep on N MPI ranks.
#
#   qsub -v CONFIG=scan.toml,RESULT=scan.h5 jobscripts/pbs.sh
#
# Edit the #PBS lines for your site (queue, account, ranks, walltime). PBS
# sends no signal before the walltime, so toral runs under `timeout`, which
# sends SIGTERM LEAD seconds early: toral then checkpoints and exits with 3,
# and the job reruns itself to resume. `toral jobscript --scheduler pbs`
# writes a filled-in version of this script.
#PBS -N toral
#PBS -l select=16:ncpus=1:mpiprocs=1
#PBS -l walltime=01:00:00
#PBS -r y
#PBS -j oe

set -u
cd "${PBS_O_WORKDIR:-.}"
config=${CONFIG:?pass -v CONFIG=...}
result=${RESULT:?pass -v RESULT=...}
toral_bin=${TORAL:-toral}
ranks=${RANKS:-16}
wall_seconds=${WALL_SECONDS:-3600}
lead=${LEAD:-300}
export OMP_NUM_THREADS=1 OPENBLAS_NUM_THREADS=1

"$toral_bin" check "$config" || exit $?
timeout --signal=TERM --kill-after=60 $((wall_seconds - lead)) \
  mpiexec -n "$ranks" "$toral_bin" run "$config" -o "$result" --resume
rc=$?
if [ -e "$result.journal" ]; then
  echo "toral: unfinished (exit $rc); rerunning to resume"
  qrerun "$PBS_JOBID"
  exit 0
fi
exit $rc
