#!/usr/bin/python3
"""Runs porebench_bench for two benchmarks and prints the ratio of their real times.

Usage: bench_ratio.py BENCH_BINARY SLOW_NAME FAST_NAME [GOAL]
Example: bench/peers/bench_ratio.py build/porebench_bench BM_MedianR1_ITK BM_MedianR1_Ours 5
Prints "SLOW / FAST = R x (goal >= GOAL): met|not met".
"""
import json
import subprocess
import sys


def main():
    binary, slow, fast = sys.argv[1:4]
    goal = float(sys.argv[4]) if len(sys.argv) > 4 else None
    out = subprocess.run([binary, f"--benchmark_filter=^({slow}|{fast})(/|$)", "--benchmark_format=json"],
                         check=True, capture_output=True, text=True).stdout
    times = {}
    for b in json.loads(out)["benchmarks"]:
        name = b["name"].split("/")[0]
        times[name] = b["real_time"]
    ratio = times[slow] / times[fast]
    line = f"{slow} / {fast} = {ratio:.2f} x"
    if goal is not None:
        line += f" (goal >= {goal:g}): {'met' if ratio >= goal else 'not met'}"
    print(line)


if __name__ == "__main__":
    main()
