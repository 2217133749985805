#!/bin/sh
# Issue 16, "the 512^3 scoring bundle >= 400 Mvoxel/s on 2 threads", as a ratio in one run:
# alternates two porebench_bench binaries (OLD, NEW) on BM_Score512/2, ROUNDS times each (one
# repetition of 3 iterations per turn), prints every turn's Mvoxel/s with the load beside it, then
# the medians and their ratio. This VM's speed drifts by up to ~25 % within minutes (other guests'
# memory traffic: BM_ReadBandwidth moved 27-41 GB/s in one quiet window), so compare sides only
# within one run.
# Usage: bench/ab_score512.sh OLD_BENCH NEW_BENCH [ROUNDS]   (default 5)
set -eu
OLD=$1; NEW=$2; R=${3:-5}
out=$(mktemp)
for i in $(seq 1 "$R"); do
  for side in old new; do
    B=$OLD; [ $side = new ] && B=$NEW
    v=$("$B" --benchmark_filter='BM_Score512/2' --benchmark_repetitions=1 2>/dev/null | grep real_time |
        sed 's/.*voxels_per_s=\([0-9.]*\)M.*/\1/')
    echo "$side $v $(uptime | sed 's/.*load average: //')"
  done
done | tee "$out"
awk '{a[$1] = a[$1] " " $2} END {print a["old"]; print a["new"]}' "$out" | /usr/bin/python3 -c "
import statistics as s, sys
o = [float(x) for x in sys.stdin.readline().split()]
n = [float(x) for x in sys.stdin.readline().split()]
print('median old %.1f new %.1f Mvoxel/s, ratio new/old %.3f' % (s.median(o), s.median(n), s.median(n) / s.median(o)))"
rm -f "$out"
