#!/bin/bash
# brink job script: PBS, job array of {{TASKS}} shards (no MPI; PBS Pro
# syntax -J and PBS_ARRAY_INDEX; Torque uses -t and PBS_ARRAYID).
# Rendered by `brink submit` from cluster/pbs-array.sh for the study
# {{STUDY}}.
#
# Sub-job I runs `brink run --shard I/{{TASKS}}`: its own share of the
# keys, its own log (records-shard-I-of-{{TASKS}}.log), up to {{SLOTS}}
# model run(s) at a time. A timer sends USR1 {{LEAD}} s before the
# walltime: brink stops cleanly with exit 3 and the shard is submitted
# again on its own to resume (at most {{MAX_REQUEUE}} times). When every
# shard is done: brink merge {{STUDY}}
#PBS -N {{NAME}}
#PBS -J 0-{{LAST}}
#PBS -l select=1:ncpus={{CPUS}}
#PBS -l walltime={{WALLTIME}}
#PBS -l mem={{MEMORY}}
#PBS -q {{QUEUE}}
#PBS -A {{ACCOUNT}}
#PBS -r y
#PBS -j oe

# Site environment: uncomment and adapt what your cluster needs.
# module purge
# module load my-solver
# export PATH="$HOME/.local/bin:$PATH"
# export OMP_NUM_THREADS=1

brink={{BRINK}}
study={{STUDY}}
round=${BRINK_ROUND:-0}
index=${BRINK_SHARD_INDEX:-$PBS_ARRAY_INDEX}
shard="$index/{{TASKS}}"
cd {{STUDYDIR}} || exit 1
exec >>{{FOLDER}}/pbs-shard-$index.out 2>&1
echo "brink: shard $shard, job ${PBS_JOBID} on $(hostname)," \
  "start $(date -u +%FT%TZ), round $round"
# A resubmitted job runs after the previous one has ended, perhaps on a
# node that died: the lock that run left behind is stale.
if [ "$round" -gt 0 ]; then
  rm -f "{{FOLDER}}/records-shard-$index-of-{{TASKS}}.log.lock"
fi
pid=
trap '[ -n "$pid" ] && kill -USR1 "$pid" 2>/dev/null' USR1 TERM
(sleep {{STOP_AFTER}} && kill -USR1 $$) &
timer=$!
"$brink" run --shard "$shard" --quiet "$study" &
pid=$!
# A trapped signal ends `wait` early: wait again until brink has exited.
while :; do
  wait "$pid"
  rc=$?
  kill -0 "$pid" 2>/dev/null || break
done
kill "$timer" 2>/dev/null
echo "brink: shard $shard exit status $rc, $(date -u +%FT%TZ)"
if [ "$rc" -eq 3 ] && [ "$round" -lt {{MAX_REQUEUE}} ]; then
  echo "brink: stopped before the end; submitting shard $shard again"
  sed '/^#PBS -J/d' {{SCRIPT}} |
    qsub -v BRINK_SHARD_INDEX="$index",BRINK_ROUND=$((round + 1))
fi
exit "$rc"
