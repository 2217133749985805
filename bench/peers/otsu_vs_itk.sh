#!/bin/sh
# Issue 4: otsu (histogram + apply) >= 10x ITK's OtsuThresholdImageFilter on the same 256^3 float
# volume. Runs the benchmarks of bench/bench_global_itk.cpp in alternating rounds (ITK, ours, ours'
# parts, ... ; bench/peers/peerlib.py: medians, load, refused when a side's spread > 25 %) and
# prints the ratio ITK / ours and the share of each part.
# Usage: bench/peers/otsu_vs_itk.sh [path/to/porebench_bench] [ROUNDS]
# Exit 0 met, 1 below 10x, 3 refused (too noisy to say).
set -eu
BENCH=${1:-build/porebench_bench}
ROUNDS=${2:-5}
exec /usr/bin/python3 - "$BENCH" "$ROUNDS" "$(dirname "$0")" <<'PY'
import statistics, sys
sys.path.insert(0, sys.argv[3])
import peerlib
bench, rounds = sys.argv[1], int(sys.argv[2])
names = ["BM_OtsuItk", "BM_OtsuBinarise", "BM_OtsuPorebench",
         "BM_OtsuPart_Histogram", "BM_OtsuPart_AirBelow", "BM_OtsuPart_AirToPores"]
# BM_OtsuBinarise on the 256^3 float volume (its other arguments: 512^3, uint16 data)
full = {"BM_OtsuBinarise": "BM_OtsuBinarise/256/0"}
run = peerlib.alternate({n: peerlib.bench_side(bench, full.get(n, n)) for n in names}, rounds)
med = {n: statistics.median(t) * 1e3 for n, t in run["times"].items()}
print(f"otsu 256^3 float, medians of {rounds} alternating rounds: porebench {med['BM_OtsuPorebench']:.1f} ms, "
      f"ITK OtsuThresholdImageFilter {med['BM_OtsuItk']:.1f} ms; load {run['load'][0]:.2f} -> {run['load'][1]:.2f}")
for part in names[3:]:
    print(f"  {part[12:]:<12} {med[part]:8.1f} ms  ({100 * med[part] / med['BM_OtsuPorebench']:.0f} % of ours)")
# Like for like: ITK's filter thresholds and binarises; it does not extract pores.
_, v = peerlib.ratio(run, "BM_OtsuItk", "BM_OtsuBinarise", 10, what="ITK / porebench threshold+binarise")
peerlib.ratio(run, "BM_OtsuItk", "BM_OtsuPorebench",
              what="ITK / porebench with pore extraction (work ITK's filter does not do)")
sys.exit(peerlib.exit_status([v]))
PY
