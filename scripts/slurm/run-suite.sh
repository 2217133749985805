#!/usr/bin/env bash
# Runs a porebench suite on a Slurm cluster: a job array of N shards, then one job that writes the
# reports once every shard has ended.
#
#   scripts/slurm/run-suite.sh [--wait] SUITE DIR N [sbatch options...]
#
#   SUITE  suite file (TOML); DIR  output folder on a file system every node sees (with flock:
#          NFSv4, Lustre mounted with flock, GPFS, BeeGFS); N  number of shards (array tasks).
#   sbatch options are passed to both jobs, e.g. the ones a lab usually sets:
#          --partition=ct --time=04:00:00 --mem=16G --cpus-per-task=4 --account=qa
#   --wait  block until the report job ends and exit with its code (0: every criterion met,
#          1: a criterion not met, 2: bad input); without it, print the two job ids and exit 0.
#   POREBENCH=/path/to/porebench selects the binary (default: build/porebench beside this script's
#          checkout, else porebench on PATH). The binary and the suite must be visible on the nodes.
#
# Each array task runs `porebench run SUITE -o DIR --shard K/N --resume`: shards share DIR (each
# holds its own shard lock; one prepares a dataset while the others wait), and a shard that was
# killed or timed out can be resubmitted alone (sbatch --array=K ...) and continues where it stopped.
# The report job runs `porebench run SUITE -o DIR --resume` after all shards (afterany): it runs any
# cell a failed shard left undone, then writes results.json, the tables, the report and the record.
# Logs: DIR/slurm/shard-K.log and DIR/slurm/report.log.
set -euo pipefail
wait_for_end=0
if [ "${1:-}" = "--wait" ]; then wait_for_end=1; shift; fi
if [ $# -lt 3 ]; then
  sed -n '2,21p' "$0" | sed 's/^# \{0,1\}//' >&2
  exit 2
fi
suite=$1 dir=$2 n=$3
shift 3
die() { echo "run-suite.sh: $*" >&2; exit 2; }
[[ "$n" =~ ^[1-9][0-9]{0,3}$ ]] || die "N (number of shards) must be a whole number from 1 to 9999, got '$n'"
[ -f "$suite" ] || die "suite file $suite does not exist"
here=$(cd "$(dirname "$0")/../.." && pwd)
pb=${POREBENCH:-}
if [ -z "$pb" ]; then
  if [ -x "$here/build/porebench" ]; then pb="$here/build/porebench"; else pb=$(command -v porebench || true); fi
fi
[ -n "$pb" ] && [ -x "$pb" ] || die "porebench binary not found (set POREBENCH=/path/to/porebench, got '${pb}')"
command -v sbatch >/dev/null || die "sbatch not found: this script submits to Slurm"
pb=$(cd "$(dirname "$pb")" && pwd)/$(basename "$pb")
suite=$(cd "$(dirname "$suite")" && pwd)/$(basename "$suite")
mkdir -p "$dir/slurm"
dir=$(cd "$dir" && pwd)
# The suite is checked here, before anything is queued: bad input is exit 2 now, not in N jobs.
"$pb" --quiet run "$suite" -o "$dir" --check || die "suite $suite refused (see above); nothing submitted"
q() { printf '%q' "$1"; }
shards=$(sbatch --parsable --job-name=porebench-shards --array=1-"$n" --output="$dir/slurm/shard-%a.log" "$@" \
  --wrap="$(q "$pb") run $(q "$suite") -o $(q "$dir") --shard \$SLURM_ARRAY_TASK_ID/$n --resume")
shards=${shards%%;*}
wait_flag=()
[ "$wait_for_end" = 1 ] && wait_flag=(--wait)
set +e
report=$(sbatch --parsable "${wait_flag[@]}" --job-name=porebench-report --dependency=afterany:"$shards" \
  --output="$dir/slurm/report.log" "$@" --wrap="$(q "$pb") run $(q "$suite") -o $(q "$dir") --resume")
rc=$?
set -e
report=${report%%;*}
echo "shards: job $shards (array 1-$n); reports: job $report; output $dir"
[ "$wait_for_end" = 1 ] && exit $rc
[ $rc -eq 0 ] || die "sbatch refused the report job (exit $rc)"
