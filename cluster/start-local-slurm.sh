#!/usr/bin/env bash
# Starts a one-node Slurm cluster on this machine for retort's cluster test:
# munged, slurmctld and slurmd in the background, one node called "localhost".
# Needs root (Debian or Ubuntu; no systemd needed). Installs slurmctld, slurmd,
# slurm-client and munge with apt-get when they are missing.
#
# Exit 0: the node is idle and takes jobs. Exit 77: Slurm cannot be had here (not
# root, or the packages cannot be installed); the caller decides whether that is a
# skip or a failure. Any other exit: the daemons were installed but did not start.
# Stop everything with cluster/stop-local-slurm.sh.
set -euo pipefail

STATE=${RETORT_SLURM_STATE:-/var/lib/retort-slurm}
LOGS=$STATE/log

cannot() { echo "start-local-slurm: $*" >&2; exit 77; }

[ "$(id -u)" -eq 0 ] || cannot "must run as root to install and start Slurm"

if ! command -v slurmctld >/dev/null 2>&1 || ! command -v slurmd >/dev/null 2>&1 \
   || ! command -v sbatch >/dev/null 2>&1 || ! command -v munged >/dev/null 2>&1; then
  command -v apt-get >/dev/null 2>&1 || cannot "no apt-get to install Slurm with"
  echo "start-local-slurm: installing slurmctld slurmd slurm-client munge" >&2
  apt-get update -q >/dev/null || cannot "apt-get update failed"
  DEBIAN_FRONTEND=noninteractive apt-get install -y -q --no-install-recommends \
    slurmctld slurmd slurm-client munge >/dev/null || cannot "apt-get install failed"
fi

# Authentication: a munge key readable by the munge user only, and munged running.
if [ ! -s /etc/munge/munge.key ]; then
  mkdir -p /etc/munge
  mungekey --create --keyfile=/etc/munge/munge.key
  chown munge:munge /etc/munge/munge.key
  chmod 0400 /etc/munge/munge.key
fi
install -d -o munge -g munge -m 0755 /run/munge
mkdir -p "$STATE"
: > "$STATE/started"
if ! munge -n 2>/dev/null | unmunge >/dev/null 2>&1; then
  runuser -u munge -- /usr/sbin/munged
  echo /run/munge/munged.pid >> "$STATE/started"
  for _ in $(seq 40); do
    munge -n 2>/dev/null | unmunge >/dev/null 2>&1 && break
    sleep 0.25
  done
fi
munge -n | unmunge >/dev/null || { echo "start-local-slurm: munged did not start" >&2; exit 1; }

# Configuration: process tracking by /proc (no cgroups), no task plugin, no accounting.
# RealMemory a little below what slurmd will detect, or the node drains itself.
mkdir -p /etc/slurm "$STATE/ctld" "$STATE/d" "$LOGS"
cpus=$(nproc)
mem=$(awk '/^MemTotal:/ { printf "%d", $2 / 1024 * 0.85 }' /proc/meminfo)
cat > /etc/slurm/slurm.conf <<CONF
# Written by retort's cluster/start-local-slurm.sh: one node on localhost for tests.
ClusterName=retortci
SlurmctldHost=localhost
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
CredType=cred/munge
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
MpiDefault=none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
SelectType=select/cons_tres
SelectTypeParameters=CR_Core
SchedulerType=sched/backfill
SchedulerParameters=batch_sched_delay=0,sched_min_interval=0
MailProg=/bin/true
ReturnToService=2
MinJobAge=600
StateSaveLocation=$STATE/ctld
SlurmdSpoolDir=$STATE/d
SlurmctldPidFile=/run/slurmctld.pid
SlurmdPidFile=/run/slurmd.pid
SlurmctldLogFile=$LOGS/slurmctld.log
SlurmdLogFile=$LOGS/slurmd.log
NodeName=localhost NodeAddr=127.0.0.1 CPUs=$cpus RealMemory=$mem State=UNKNOWN
PartitionName=ci Nodes=ALL Default=YES MaxTime=INFINITE State=UP
CONF

# Daemons fork into the background and write their pid files. -c: forget jobs left
# from an earlier start. -N localhost: the node name does not depend on the hostname.
slurmctld -c
echo /run/slurmctld.pid >> "$STATE/started"
slurmd -N localhost
echo /run/slurmd.pid >> "$STATE/started"
for _ in $(seq 120); do
  if [ "$(sinfo -h -o '%T' 2>/dev/null | head -n1)" = idle ]; then
    sinfo
    exit 0
  fi
  sleep 0.5
done
echo "start-local-slurm: the node did not become idle; last log lines:" >&2
tail -n 20 "$LOGS/slurmctld.log" "$LOGS/slurmd.log" >&2 || true
exit 1
