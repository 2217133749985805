#!/bin/sh
# Issue 4: otsu (histogram + apply) >= 10x ITK's OtsuThresholdImageFilter on the same 256^3 float
# volume. Runs both benchmarks of bench/bench_global_itk.cpp (wall time, same threads, median of
# REPS runs) and the parts of ours, then prints the ratio ITK / ours and the share of each part.
# Usage: bench/peers/otsu_vs_itk.sh [path/to/porebench_bench] [REPS]   (exit 1 if below 10x)
set -eu
BENCH=${1:-build/porebench_bench}
REPS=${2:-3}
out=$(mktemp)
trap 'rm -f "$out"' EXIT
"$BENCH" --benchmark_filter='^BM_Otsu' --benchmark_repetitions="$REPS" \
  --benchmark_report_aggregates_only=true --benchmark_format=json >"$out"
/usr/bin/python3 - "$out" <<'PY'
import json, sys
runs = json.load(open(sys.argv[1]))["benchmarks"]
t = {r["run_name"].split("/")[0]: r["real_time"] for r in runs if r.get("aggregate_name") == "median"}
ours, itk = t["BM_OtsuPorebench"], t["BM_OtsuItk"]
print(f"otsu 256^3 float, median wall time: porebench {ours:.1f} ms, ITK OtsuThresholdImageFilter {itk:.1f} ms")
for part in ("BM_OtsuPart_Histogram", "BM_OtsuPart_AirBelow", "BM_OtsuPart_AirToPores"):
    if part in t:
        print(f"  {part[12:]:<12} {t[part]:8.1f} ms  ({100 * t[part] / ours:.0f} % of ours)")
# Like for like: ITK's filter thresholds and binarises; it does not extract pores.
ratio = itk / t["BM_OtsuBinarise"]
print(f"ratio ITK / porebench threshold+binarise = {ratio:.2f} (target >= 10): {'PASS' if ratio >= 10 else 'FAIL'}")
print(f"ratio ITK / porebench with pore extraction = {itk / ours:.2f} (extraction is work ITK's filter does not do)")
sys.exit(0 if ratio >= 10 else 1)
PY
