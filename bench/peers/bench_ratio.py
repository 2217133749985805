#!/usr/bin/python3
"""Runs two benchmarks of porebench_bench in alternating rounds and prints the ratio of their
median real times (bench/peers/peerlib.py: refused when a side's spread is wider than 25 %).

Usage: bench_ratio.py BENCH_BINARY SLOW_NAME FAST_NAME [GOAL] [--rounds N]
Example: bench/peers/bench_ratio.py build/porebench_bench BM_MedianR1_ITK BM_MedianR1_Ours 5
Prints "SLOW / FAST = R x (goal >= GOAL): met|not met" or REFUSED; exit 0 met, 1 not met, 3 refused.
"""
import argparse
import sys

import peerlib


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("binary")
    ap.add_argument("slow")
    ap.add_argument("fast")
    ap.add_argument("goal", nargs="?", type=float)
    ap.add_argument("--rounds", type=int, default=5)
    a = ap.parse_args()
    run = peerlib.alternate({a.slow: peerlib.bench_side(a.binary, a.slow),
                             a.fast: peerlib.bench_side(a.binary, a.fast)}, a.rounds)
    _, verdict = peerlib.ratio(run, a.slow, a.fast, a.goal)
    sys.exit(peerlib.exit_status([verdict]))


if __name__ == "__main__":
    main()
