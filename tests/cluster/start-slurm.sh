#!/usr/bin/env bash
# Starts a single-node Slurm (munge, slurmctld, slurmd) on this machine for
# brink's cluster tests, unless it is already up. Idempotent: a running
# daemon is left alone. Needs root and the Debian packages slurm-wlm and
# munge (scripts/setup installs them). Exits 0 when `sinfo` shows the node
# idle (or mixed/allocated: already in use), 1 otherwise.
#
# Configuration: a one-node cluster called "ci" on localhost with 4 CPUs
# (more than the machine may have, so 3-rank and 4-task jobs start), no
# cgroups, no accounting; see docs/cluster.md.
set -euo pipefail
[ "$(id -u)" -eq 0 ] || { echo "start-slurm: needs root" >&2; exit 1; }
for p in munged slurmctld slurmd sinfo; do
  command -v "$p" >/dev/null 2>&1 || [ -x "/usr/sbin/$p" ] ||
    { echo "start-slurm: $p is not installed" >&2; exit 1; }
done
PATH=/usr/sbin:$PATH
# Tests running side by side may call this at the same moment. The
# daemons must not inherit the lock (9>&- below), or they would hold it.
exec 9>/run/brink-start-slurm-v2.lock
flock -w 300 9 || { echo "start-slurm: lock busy for 300 s" >&2; exit 1; }

node_up() {
  sinfo -h -o %T 2>/dev/null | grep -Eqx 'idle|mixed|allocated|completing'
}
alive() { [ -s "$1" ] && kill -0 "$(cat "$1")" 2>/dev/null; }

if alive /run/slurmctld.pid && alive /run/slurmd.pid && node_up; then
  exit 0
fi

conf=/etc/slurm/slurm.conf
want=$(cat <<'CONF'
# Written by brink's tests/cluster/start-slurm.sh: one-node cluster.
ClusterName=ci
SlurmctldHost=localhost
SlurmUser=root
AuthType=auth/munge
MpiDefault=none
ProctrackType=proctrack/pgid
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
JobCompType=jobcomp/none
SchedulerType=sched/backfill
SchedulerParameters=batch_sched_delay=0
SelectType=select/cons_tres
SelectTypeParameters=CR_Core
SlurmdParameters=config_overrides
ReturnToService=2
MinJobAge=600
MailProg=/bin/true
StateSaveLocation=/var/spool/slurmctld
SlurmdSpoolDir=/var/spool/slurmd
SlurmctldPidFile=/run/slurmctld.pid
SlurmdPidFile=/run/slurmd.pid
SlurmctldLogFile=/var/log/slurm/slurmctld.log
SlurmdLogFile=/var/log/slurm/slurmd.log
NodeName=localhost NodeAddr=127.0.0.1 CPUs=4 RealMemory=4096 State=UNKNOWN
PartitionName=debug Nodes=localhost Default=YES MaxTime=INFINITE State=UP
CONF
)
# A minimal system may have no name for localhost, which slurm.conf uses.
getent hosts localhost >/dev/null 2>&1 || echo "127.0.0.1 localhost" >> /etc/hosts
mkdir -p /etc/slurm
if [ ! -f "$conf" ] || ! grep -q "brink's tests/cluster/start-slurm.sh" "$conf"; then
  [ -f "$conf" ] && cp "$conf" "$conf.before-brink"
  printf '%s\n' "$want" > "$conf"
fi
install -d /var/spool/slurmctld /var/spool/slurmd /var/log/slurm
install -d -o munge -g munge -m 0755 /run/munge
[ -s /etc/munge/munge.key ] || mungekey -c 9>&-
if ! alive /run/munge/munged.pid; then
  runuser -u munge -- /usr/sbin/munged 9>&-
fi
alive /run/slurmctld.pid || slurmctld 9>&-
alive /run/slurmd.pid || slurmd -N localhost 9>&-
i=0
until node_up; do
  i=$((i + 1))
  if [ $i -ge 150 ]; then
    echo "start-slurm: the node did not come up; see /var/log/slurm/" >&2
    sinfo >&2 || true
    exit 1
  fi
  sleep 0.2
done
