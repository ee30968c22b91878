#!/usr/bin/env bash
# Shards started by Slurm's `srun` (Debian's slurmctld and slurmd, one node: this machine, with a
# configuration of the test's own in $BUILDDIR, loopback only): `srun -n 2` runs two `squall run`
# with one --start-at against the embedded target. Checked outside squall: each shard's index is
# SLURM_PROCID + 1 as srun gave it (written by the shard's own shell), the count srun's task
# count; the target's /stats counts equal the merged counts; the merge judges the objectives.
# Needs root (the daemons run as root here) and munge's key (installed by the munge package).
set -uo pipefail
source "$SRCDIR/tests/integration/lib/target.sh"
source "$SRCDIR/tests/integration/lib/run.sh"
T="$BUILDDIR/launch-slurm"
rm -rf "$T"
mkdir -p "$T/state" "$T/spool"
for b in slurmctld slurmd srun munged; do
    command -v "$b" >/dev/null || [ -x "/usr/sbin/$b" ] || {
        echo "FAIL: $b not found (tools/setup installs slurmd, slurmctld, slurm-client, munge)"
        exit 1
    }
done
[ "$(id -u)" = 0 ] || { echo "FAIL: the Slurm test runs its daemons as root"; exit 1; }

# munge: use a running munged, else start one (as the munge user) and stop it at the end.
MUNGED_PID=
if ! munge -n >/dev/null 2>&1; then
    mkdir -p /run/munge && chown munge:munge /run/munge
    su -s /bin/sh munge -c "/usr/sbin/munged --force --pid-file=/run/munge/munged.pid" || {
        echo "FAIL: munged did not start"
        exit 1
    }
    MUNGED_PID=$(cat /run/munge/munged.pid 2>/dev/null)
fi
H=$(hostname -s)
CPORT=$(free_port)
DPORT=$(free_port)
export SLURM_CONF="$T/slurm.conf"
cat >"$SLURM_CONF" <<EOF
ClusterName=squalltest
SlurmctldHost=$H(127.0.0.1)
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
StateSaveLocation=$T/state
SlurmdSpoolDir=$T/spool
SlurmctldPidFile=$T/ctld.pid
SlurmdPidFile=$T/d.pid
SlurmctldLogFile=$T/ctld.log
SlurmdLogFile=$T/d.log
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
SelectType=select/cons_tres
SelectTypeParameters=CR_Core
SchedulerType=sched/builtin
MpiDefault=none
ReturnToService=2
SlurmctldPort=$CPORT
SlurmdPort=$DPORT
NodeName=$H NodeAddr=127.0.0.1 CPUs=$(nproc) State=UNKNOWN
PartitionName=squall Nodes=ALL Default=YES MaxTime=10 State=UP
EOF
stop_slurm() {
    for f in "$T/d.pid" "$T/ctld.pid"; do
        [ -s "$f" ] && stop_pid "$(cat "$f")"
    done
    [ -n "$MUNGED_PID" ] && stop_pid "$MUNGED_PID"
    serve_stop
}
/usr/sbin/slurmctld -f "$SLURM_CONF" && /usr/sbin/slurmd -f "$SLURM_CONF" || {
    echo "FAIL: the Slurm daemons did not start"
    cat "$T"/*.log 2>/dev/null | tail -20
    stop_slurm
    exit 1
}
serve_start || { stop_slurm; exit 1; }
trap stop_slurm EXIT
for _ in $(seq 100); do # the node registers within a few seconds
    sinfo -h -o %t 2>/dev/null | grep -q idle && break
    sleep 0.1
done

curl -s -X PUT -d '{"model":"t-a"}' "$SERVE_URL/v1/sites/north/gateways/gw-1" >/dev/null
cat >"$T/plan.yaml" <<YAML
seed: 5 # shards of one run share a seed (merge refuses others)
target: {url: "$SERVE_URL", connections: 8, timeout: 5s}
requests:
  read: {kind: get, path: /v1/sites/north/gateways/gw-1}
phases:
  - {name: steady, rate: 100/s, duration: 2s, mix: {read: 1}}
objectives:
  - {class: read, p99: 1s}
YAML
gets() { serve_stats 's["requests"].get("GET", {}).get("200", 0)'; }
before=$(gets)
START=$(instant_in 4)
export SQUALL T START
timeout 90 srun -n 2 -t 1 sh -c 'echo "$SLURM_PROCID $SLURM_STEP_NUM_TASKS" >"$T/task-$SLURM_PROCID" &&
    "$SQUALL" run "$T/plan.yaml" -o "$T/shard-$SLURM_PROCID" --quiet --start-at "$START"' \
    >"$T/srun.out" 2>&1
RC=$?
after=$(gets)
expect "srun -n 2 ran two shards (exit $RC; 7 only when generator-bound)" test "$RC" = 0 -o "$RC" = 7
[ "$RC" = 0 ] || tail -5 "$T/srun.out"
for r in 0 1; do
    read -r procid ntasks <"$T/task-$r" || true
    rcheck "task $r: shard $((procid + 1))/$ntasks from slurm" \
        "d['sections']['launch']['shard']['from'] == 'slurm' and
         d['sections']['launch']['shard']['index'] == $procid + 1 and
         d['sections']['launch']['shard']['count'] == $ntasks == 2" "$T/shard-$r"
done
"$SQUALL" merge "$T/shard-0" "$T/shard-1" -o "$T/merged" >"$T/merge.out" 2>&1
MRC=$?
expect "the merge exits 0 (7 only when generator-bound; got $MRC)" test "$MRC" = 0 -o "$MRC" = 7
rcheck "merged counts = the target's answers ($((after - before))); every objective check passes" \
    "total('read', '2xx') == $((after - before)) and
     all(c['verdict'] == 'pass' for c in d['sections']['objectives']['checks'])" "$T/merged"
exit "$FAILED"
