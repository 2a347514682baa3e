#!/bin/bash
# brink job script: PBS, MPI mode. Rendered by `brink submit` from
# cluster/pbs-mpi.sh for the study {{STUDY}}.
#
# Rank 0 coordinates and keeps the records; each other rank runs up to
# {{SLOTS}} model run(s) of {{CORES}} core(s) at a time. PBS gives no
# warning before the walltime, so a timer sends USR1 {{LEAD}} s before it:
# brink stops its models, keeps what finished and exits 3, and the script
# submits itself again to resume from the records (at most
# {{MAX_REQUEUE}} times).
#PBS -N {{NAME}}
#PBS -l select={{RANKS}}:ncpus={{CPUS}}:mpiprocs=1
#PBS -l walltime={{WALLTIME}}
#PBS -l mem={{MEMORY}}
#PBS -q {{QUEUE}}
#PBS -A {{ACCOUNT}}
#PBS -r y
#PBS -j oe

# Site environment: uncomment and adapt what your cluster needs.
# module purge
# module load gcc openmpi
# module load my-solver
# export PATH="$HOME/.local/bin:$PATH"
# export OMP_NUM_THREADS=1

brink={{BRINK}}
study={{STUDY}}
round=${BRINK_ROUND:-0}
cd {{STUDYDIR}} || exit 1
exec >>{{FOLDER}}/pbs-mpi.out 2>&1
echo "brink: job ${PBS_JOBID} on $(hostname), start $(date -u +%FT%TZ)," \
  "round $round"
# A resubmitted job runs after the previous one has ended, perhaps on a
# node that died: the lock that run left behind is stale.
if [ "$round" -gt 0 ]; then
  rm -f "{{FOLDER}}/records.log.lock"
fi
pid=
trap '[ -n "$pid" ] && kill -USR1 "$pid" 2>/dev/null' USR1 TERM
(sleep {{STOP_AFTER}} && kill -USR1 $$) &
timer=$!
{{LAUNCH}} "$brink" run --mpi --quiet "$study" &
pid=$!
# A trapped signal ends `wait` early: wait again until brink has exited.
while :; do
  wait "$pid"
  rc=$?
  kill -0 "$pid" 2>/dev/null || break
done
kill "$timer" 2>/dev/null
echo "brink: exit status $rc, $(date -u +%FT%TZ)"
if [ "$rc" -eq 3 ] && [ "$round" -lt {{MAX_REQUEUE}} ]; then
  echo "brink: stopped before the end; submitting again to resume"
  qsub -v BRINK_ROUND=$((round + 1)) {{SCRIPT}}
fi
exit "$rc"
