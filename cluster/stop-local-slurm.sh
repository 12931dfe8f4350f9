#!/usr/bin/env bash
# Stops the daemons cluster/start-local-slurm.sh started (and only those), by the
# pids they wrote: slurmd, slurmctld, and munged when the start script launched it.
set -u
STATE=${RETORT_SLURM_STATE:-/var/lib/retort-slurm}
[ -s "$STATE/started" ] || exit 0
tac "$STATE/started" | while read -r f; do
  [ -s "$f" ] || continue
  pid=$(cat "$f")
  kill "$pid" 2>/dev/null || true
  for _ in $(seq 40); do kill -0 "$pid" 2>/dev/null || break; sleep 0.25; done
done
rm -f "$STATE/started"
