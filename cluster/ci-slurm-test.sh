#!/usr/bin/env bash
# retort on a real (one-node) Slurm cluster, end to end:
#  1. start Slurm on localhost (cluster/start-local-slurm.sh; installs it when missing);
#  2. run the demo chapter recipe (or, before it exists, the engine's chapter fixture)
#     as a 4-shard array plus an afterok gather job with `retort slurm --submit`, and
#     check results.json is byte-identical to a single-process run of the same recipe;
#  3. second run, on a recipe with one slow item: cancel that shard while it works,
#     check the gather job never runs and `retort status` shows the shard unfinished,
#     resubmit, check only that shard is resubmitted and the results are complete and
#     byte-identical to a single-process run.
# Skips (exit 0, "SKIPPED" message) only when Slurm cannot be installed or started
# for want of root or packages; with RETORT_REQUIRE_SLURM=1 that is a failure.
set -euo pipefail
cd "$(dirname "$0")/.."
REPO=$PWD
T0=$(date +%s)

skip() {
  if [ "${RETORT_REQUIRE_SLURM:-0}" = 1 ]; then
    echo "FAILED slurm test: $* (RETORT_REQUIRE_SLURM=1)" >&2
    exit 1
  fi
  echo "SKIPPED slurm test: $*"
  exit 0
}
fail() { echo "FAILED slurm test: $*" >&2; exit 1; }

rc=0
bash cluster/start-local-slurm.sh || rc=$?
case $rc in
  0) ;;
  77) skip "Slurm cannot be installed or started here (see the message above)" ;;
  *) fail "Slurm was installed but did not start (exit $rc)" ;;
esac
trap 'bash "$REPO/cluster/stop-local-slurm.sh"' EXIT
echo "== slurm up after $(( $(date +%s) - T0 )) s"

cargo build -q -p engine --bin retort
TARGET=$(cargo metadata --format-version 1 --no-deps | sed -n 's/.*"target_directory":"\([^"]*\)".*/\1/p')
R=$TARGET/debug/retort
[ -x "$R" ] || fail "no retort binary at $R"

W=$(mktemp -d "${TMPDIR:-/tmp}/retort-slurm.XXXXXX")
echo "== work folder $W"

# Waits (bounded) until job $1 reaches a final state; prints the state.
wait_job() {
  local id=$1 limit=${2:-300} st=
  local deadline=$(( $(date +%s) + limit ))
  while [ "$(date +%s)" -lt "$deadline" ]; do
    st=$(scontrol show job "$id" 2>/dev/null | grep -o 'JobState=[A-Z_]*' | head -n1 | cut -d= -f2 || true)
    case "$st" in
      COMPLETED|FAILED|CANCELLED|TIMEOUT|NODE_FAIL|OUT_OF_MEMORY|PREEMPTED|BOOT_FAIL|DEADLINE) echo "$st"; return 0 ;;
    esac
    sleep 0.5
  done
  echo "TIMEOUT_WAITING($st)"
}
exit_code_of() { scontrol show job "$1" | grep -o ' ExitCode=[0-9]*' | head -n1 | cut -d= -f2; }
ids_of() { # "submitted shards job A (...) and gather job G (...)" -> "A G"
  sed -n 's/^submitted shards job \([0-9]*\) .* gather job \([0-9]*\) .*/\1 \2/p'
}
show_logs() { tail -n 30 "$1"/slurm/logs/*.log 2>/dev/null || true; }

# ---- 1. the chapter recipe as a 4-shard array
if [ -f recipes-demo/chapter.yaml ]; then
  cp -r recipes-demo "$W/demo"; rm -rf "$W/demo/out" "$W/demo/.retort"
  RECIPE=$W/demo/chapter.yaml
else
  echo "(recipes-demo/chapter.yaml not present: using the engine's chapter fixture)"
  mkdir -p "$W/demo"
  cp tests/cases/engine/chapter/chapter.yaml "$W/demo/"
  cp -r tests/cases/engine/basic "$W/demo/bands"
  RECIPE=$W/demo/chapter.yaml
fi
single_rc=0
"$R" run "$RECIPE" --no-cache --out "$W/single" --quiet || single_rc=$?
[ -f "$W/single/results.json" ] || fail "the single-process run wrote no results.json (exit $single_rc)"

T1=$(date +%s)
sub=$("$R" slurm "$RECIPE" --shards 4 --cache "$W/cache" --out "$W/job" --time 10:00 --submit)
echo "$sub"
read -r A G <<<"$(echo "$sub" | ids_of)"
[ -n "${G:-}" ] || fail "retort slurm --submit printed no job ids"
st=$(wait_job "$G")
echo "gather job $G: $st (exit $(exit_code_of "$G")); shards job $A"
[ "$st" = COMPLETED ] || [ "$st" = FAILED ] || { show_logs "$W/job"; fail "gather job ended $st"; }
[ "$(exit_code_of "$G")" = "$single_rc" ] || { show_logs "$W/job"; fail "gather exit $(exit_code_of "$G") differs from the single run's $single_rc"; }
cmp "$W/single/results.json" "$W/job/report/results.json" || fail "results.json differs from the single-process run"
"$R" status "$W/job" > "$W/status1.txt" || true
cat "$W/status1.txt"
# Status counts what the single run could not do: its failed items and what they block.
"$R" status "$W/single" > "$W/status-single.txt" || true
want=$(sed -n 's/.* \([0-9]*\) failed, \([0-9]*\) not run.*/\1 failed, \2 pending/p' "$W/status-single.txt")
grep -q " $want\$" "$W/status1.txt" || fail "status does not show '$want' as the single run does"
echo "== array run: results.json identical ($(( $(date +%s) - T1 )) s)"

# ---- 2. kill one shard mid-way, resubmit
mkdir -p "$W/slow"
cp -r tests/cases/engine/basic/. "$W/slow/"
# One item with 1.5 million rows: its shard works for seconds, the others for milliseconds.
awk 'BEGIN { print "energy_eV,absorbance"; n = 1500000;
             for (i = 0; i < n; i++) { x = 1 + 3 * i / n; printf "%.7f,%.6f\n", x, 0.1 + exp(-((x - 2.2) / 0.2) ^ 2) } }' \
  > "$W/slow/data/film_z.csv"
"$R" run "$W/slow/recipe.yaml" --no-cache --out "$W/slow-single" --quiet || fail "single run of the slow recipe failed"
T2=$(date +%s)
sub=$("$R" slurm "$W/slow/recipe.yaml" --shards 4 --cache "$W/cache2" --out "$W/job2" --time 10:00 --submit)
echo "$sub"
read -r A G <<<"$(echo "$sub" | ids_of)"
LOGDIR=$(sed -n 's/.*"shard_logs": "\([^"]*\)".*/\1/p' "$W/job2/slurm/job.json")
victim=
deadline=$(( $(date +%s) + 120 ))
while [ -z "$victim" ] && [ "$(date +%s)" -lt "$deadline" ]; do
  for f in "$LOGDIR"/shard-*.json; do
    [ -f "$f" ] || continue
    if grep -q '"state": "running"' "$f" && grep -q '"job": "' "$f"; then
      # Only the slow shard is still running once the others have finished.
      finished=$(grep -l '"state": "finished"' "$LOGDIR"/shard-*.json 2>/dev/null | wc -l)
      if [ "$finished" -eq 3 ]; then
        victim=$(sed -n 's/.*"job": "\([^"]*\)".*/\1/p' "$f")
        victim_log=$f
      fi
    fi
  done
  sleep 0.1
done
[ -n "$victim" ] || { show_logs "$W/job2"; fail "never saw the slow shard running alone"; }
scancel "$victim"
echo "cancelled shard job $victim while it was working ($victim_log)"
st=$(wait_job "$A")
echo "shards job $A: $st"
# The gather job must not run: its dependency can no longer be satisfied.
sleep 2
gst=$(scontrol show job "$G" 2>/dev/null | grep -o 'JobState=[A-Z_]*' | cut -d= -f2 || echo GONE)
echo "gather job $G after the cancel: $gst"
[ "$gst" != COMPLETED ] || fail "the gather job ran although a shard was cancelled"
[ ! -f "$W/job2/report/results.json" ] || fail "a report was written although a shard was cancelled"
grep -q '"state": "running"' "$victim_log" || fail "the killed shard's log does not say it never finished"
"$R" status "$W/job2" | tee "$W/status2.txt" || true
grep -q 'if that job is gone, the shard was killed' "$W/status2.txt" || fail "status does not show the killed shard"
[ -z "$(find "$W/cache2" -name '.tmp-*' -newer "$W/job2/slurm/job.json" -size +0 -print -quit 2>/dev/null)" ] || echo "(the killed shard left a temporary file; it is never read)"

sub=$("$R" slurm "$W/slow/recipe.yaml" --shards 4 --cache "$W/cache2" --out "$W/job2" --time 10:00 --submit)
echo "$sub"
echo "$sub" | grep -q "array tasks $(( ${victim##*_} )) of 0-3" || fail "resubmission did not ask for exactly the killed shard"
read -r A G <<<"$(echo "$sub" | ids_of)"
st=$(wait_job "$G")
echo "gather job $G: $st"
[ "$st" = COMPLETED ] || { show_logs "$W/job2"; fail "gather job after resubmission ended $st"; }
cmp "$W/slow-single/results.json" "$W/job2/report/results.json" || fail "results.json after resubmission differs from the single-process run"
"$R" status "$W/job2"
echo "== kill and resubmit: results.json identical ($(( $(date +%s) - T2 )) s)"
rm -rf "$W"
echo "SLURM TEST OK ($(( $(date +%s) - T0 )) s in all)"
