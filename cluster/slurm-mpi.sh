#!/bin/bash
# brink job script: Slurm, MPI mode. Rendered by `brink submit` from
# cluster/slurm-mpi.sh for the study {{STUDY}}.
#
# Rank 0 coordinates and keeps the records; each other rank runs up to
# {{SLOTS}} model run(s) of {{CORES}} core(s) at a time. {{LEAD}} s before
# the time limit Slurm sends USR1 to this shell, which passes it on: brink stops its models,
# keeps what finished and exits 3, and the job requeues itself to resume
# from the records (at most {{MAX_REQUEUE}} times).
#SBATCH --job-name={{NAME}}
#SBATCH --ntasks={{RANKS}}
#SBATCH --cpus-per-task={{CPUS}}
#SBATCH --time={{TIME}}
#SBATCH --partition={{PARTITION}}
#SBATCH --account={{ACCOUNT}}
#SBATCH --mem-per-cpu={{MEMORY}}
#SBATCH --signal=B:USR1@{{LEAD}}
#SBATCH --requeue
#SBATCH --open-mode=append
#SBATCH --output={{FOLDER}}/slurm-%j.out
#SBATCH --chdir={{STUDYDIR}}

# Site environment: uncomment and adapt what your cluster needs.
# module purge
# module load gcc openmpi
# module load my-solver
# export PATH="$HOME/.local/bin:$PATH"
# export OMP_NUM_THREADS=1

brink={{BRINK}}
study={{STUDY}}
echo "brink: job ${SLURM_JOB_ID} on $(hostname), start $(date -u +%FT%TZ)," \
  "restart ${SLURM_RESTART_COUNT:-0}"
# A requeued job runs after its previous run has ended, perhaps on a node
# that died: the lock that run left behind is stale.
if [ "${SLURM_RESTART_COUNT:-0}" -gt 0 ]; then
  rm -f "{{FOLDER}}/records.log.lock"
fi
pid=
trap '[ -n "$pid" ] && kill -USR1 "$pid" 2>/dev/null' USR1 TERM
{{LAUNCH}} "$brink" run --mpi --quiet "$study" &
pid=$!
# A trapped signal ends `wait` early: wait again until brink has exited.
while :; do
  wait "$pid"
  rc=$?
  kill -0 "$pid" 2>/dev/null || break
done
echo "brink: exit status $rc, $(date -u +%FT%TZ)"
if [ "$rc" -eq 3 ] && [ "${SLURM_RESTART_COUNT:-0}" -lt {{MAX_REQUEUE}} ]; then
  echo "brink: stopped before the end; requeueing to resume"
  scontrol requeue "$SLURM_JOB_ID"
fi
exit "$rc"
