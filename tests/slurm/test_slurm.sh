#!/usr/bin/env bash
# Starts a single-node Slurm (munged, slurmctld, slurmd) on this machine, runs the quick suite as a
# 3-shard job array through scripts/slurm/run-suite.sh, and checks that the merged results equal a
# single-process run of the same suite, timings aside. Every daemon it started is stopped, also on
# failure. Needs root (munged as user munge, slurmd); packages slurm-wlm and munge (setup.sh --tests).
# Usage: test_slurm.sh PATH/TO/porebench SOURCE_DIR
set -euo pipefail
pb=$1 src=$2
[ "$(id -u)" -eq 0 ] || { echo "skipped: starting munged and slurmd needs root"; exit 77; }
for c in munged slurmctld slurmd sbatch scontrol sinfo runuser; do
  command -v "$c" >/dev/null || { echo "FAIL: $c not found (scripts/setup.sh --tests installs slurm-wlm and munge)"; exit 1; }
done
T=$(mktemp -d /tmp/pb-slurm.XXXXXX)
chmod 755 "$T"
mkdir -p "$T/munge" "$T/state" "$T/spool" "$T/log"
chown munge: "$T/munge"
started=()
cleanup() {
  set +e
  [ -n "${SLURM_CONF:-}" ] && timeout 10 scontrol shutdown >/dev/null 2>&1
  for f in "$T/slurmd.pid" "$T/slurmctld.pid" "$T/munge/munged.pid"; do
    [ -f "$f" ] && kill "$(cat "$f")" 2>/dev/null
  done
  sleep 1
  for f in "$T/slurmd.pid" "$T/slurmctld.pid" "$T/munge/munged.pid"; do
    [ -f "$f" ] && kill -9 "$(cat "$f")" 2>/dev/null
  done
  if [ "${keep:-0}" = 1 ]; then echo "kept $T"; else rm -rf "$T"; fi
}
trap cleanup EXIT
fail() { echo "FAIL: $*"; keep=1; tail -n 20 "$T"/log/*.log "$T"/sharded/slurm/*.log 2>/dev/null; exit 1; }

# munged on its own socket, so that a munged of the machine (if any) is left alone.
runuser -u munge -- munged --socket="$T/munge/munge.sock" --pid-file="$T/munge/munged.pid" \
  --log-file="$T/munge/munged.log" --seed-file="$T/munge/munged.seed" || fail "munged did not start"
port=$((20000 + RANDOM % 20000))
cat >"$T/slurm.conf" <<CONF
ClusterName=porebench-test
SlurmctldHost=localhost(127.0.0.1)
SlurmUser=root
SlurmdUser=root
AuthType=auth/munge
AuthInfo=socket=$T/munge/munge.sock
CredType=cred/munge
ProctrackType=proctrack/linuxproc
TaskPlugin=task/none
JobAcctGatherType=jobacct_gather/none
AccountingStorageType=accounting_storage/none
SelectType=select/cons_tres
SelectTypeParameters=CR_CPU
StateSaveLocation=$T/state
SlurmdSpoolDir=$T/spool
SlurmctldPidFile=$T/slurmctld.pid
SlurmdPidFile=$T/slurmd.pid
SlurmctldLogFile=$T/log/slurmctld.log
SlurmdLogFile=$T/log/slurmd.log
SlurmctldPort=$port
SlurmdPort=$((port + 1))
ReturnToService=2
NodeName=localhost NodeAddr=127.0.0.1 CPUs=$(nproc) State=UNKNOWN
PartitionName=porebench-test Nodes=localhost Default=YES MaxTime=INFINITE State=UP
CONF
export SLURM_CONF="$T/slurm.conf"
slurmctld || fail "slurmctld did not start"
slurmd -N localhost || fail "slurmd did not start"
for _ in $(seq 30); do sinfo -h -o %T 2>/dev/null | grep -q idle && break; sleep 1; done
sinfo -h -o %T | grep -q idle || fail "the node did not become idle"

suite="$src/suites/quick.toml"
set +e
POREBENCH="$pb" "$src/scripts/slurm/run-suite.sh" --wait "$suite" "$T/sharded" 3
rc_sharded=$?
"$pb" --quiet run "$suite" -o "$T/single" >/dev/null
rc_single=$?
set -e
[ "$rc_sharded" = "$rc_single" ] || fail "exit code of the sharded run $rc_sharded, of the single run $rc_single"
[ "$rc_single" = 0 ] || [ "$rc_single" = 1 ] || fail "the single run exited $rc_single"
for k in 1 2 3; do
  grep -q "cells run" "$T/sharded/slurm/shard-$k.log" || fail "shard $k did not run (see its log)"
  grep -q " 0 failed" "$T/sharded/slurm/shard-$k.log" || fail "shard $k had failed cells"
done
# The shards did the work: the report job found every cell present.
grep -q "porebench run: 0 cells run" "$T/sharded/slurm/report.log" || fail "the report job ran cells itself"
timing=',(runtime_s|peak_rss_mib),'
diff <(grep -Ev "$timing" "$T/single/results.csv") <(grep -Ev "$timing" "$T/sharded/results.csv") >"$T/diff.txt" ||
  fail "results.csv of the sharded run differs from the single run: $(head -c 2000 "$T/diff.txt")"
n=$(grep -Evc "$timing" "$T/single/results.csv")
[ "$n" -gt 100 ] || fail "results.csv has only $n rows"
echo "ok: 3 shards under Slurm merged into the single run's results ($n rows equal, timings aside)"
