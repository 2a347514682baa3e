#!/bin/bash
# brink job script: Slurm, job array of {{TASKS}} shards (no MPI).
# Rendered by `brink submit` from cluster/slurm-array.sh for the study
# {{STUDY}}.
#
# Task I runs `brink run --shard I/{{TASKS}}`: its own share of the keys,
# its own log (records-shard-I-of-{{TASKS}}.log), up to {{SLOTS}} model
# run(s) at a time. {{LEAD}} s before the time limit Slurm sends USR1 to
# this shell, which passes it on: brink stops cleanly with exit 3 and the
# task requeues itself to resume (at most {{MAX_REQUEUE}} times). When
# every task is done: brink merge {{STUDY}}
#SBATCH --job-name={{NAME}}
#SBATCH --array=0-{{LAST}}
#SBATCH --ntasks=1
#SBATCH --cpus-per-task={{CPUS}}
#SBATCH --time={{TIME}}
#SBATCH --partition={{PARTITION}}
#SBATCH --account={{ACCOUNT}}
#SBATCH --mem-per-cpu={{MEMORY}}
#SBATCH --signal=B:USR1@{{LEAD}}
#SBATCH --requeue
#SBATCH --open-mode=append
#SBATCH --output={{FOLDER}}/slurm-%A_%a.out
#SBATCH --chdir={{STUDYDIR}}

# Site environment: uncomment and adapt what your cluster needs.
# module purge
# module load my-solver
# export PATH="$HOME/.local/bin:$PATH"
# export OMP_NUM_THREADS=1

brink={{BRINK}}
study={{STUDY}}
shard="${SLURM_ARRAY_TASK_ID}/{{TASKS}}"
echo "brink: shard $shard, job ${SLURM_JOB_ID} on $(hostname)," \
  "start $(date -u +%FT%TZ), restart ${SLURM_RESTART_COUNT:-0}"
# A requeued job runs after its previous run has ended, perhaps on a node
# that died: the lock that run left behind is stale.
if [ "${SLURM_RESTART_COUNT:-0}" -gt 0 ]; then
  rm -f "{{FOLDER}}/records-shard-${SLURM_ARRAY_TASK_ID}-of-{{TASKS}}.log.lock"
fi
pid=
trap '[ -n "$pid" ] && kill -USR1 "$pid" 2>/dev/null' USR1 TERM
"$brink" run --shard "$shard" --quiet "$study" &
pid=$!
# A trapped signal ends `wait` early: wait again until brink has exited.
while :; do
  wait "$pid"
  rc=$?
  kill -0 "$pid" 2>/dev/null || break
done
echo "brink: shard $shard exit status $rc, $(date -u +%FT%TZ)"
if [ "$rc" -eq 3 ] && [ "${SLURM_RESTART_COUNT:-0}" -lt {{MAX_REQUEUE}} ]; then
  echo "brink: stopped before the end; requeueing to resume"
  scontrol requeue "$SLURM_JOB_ID"
fi
exit "$rc"
