#!/usr/bin/python3
"""3D connected components, 26-connectivity: scipy.ndimage.label vs porebench's label_components.

Usage: ccl_vs_scipy.py POREBENCH_BENCH [--repeat N] [--threads 1|2]
Builds the same two 256^3 volumes as bench/bench_metrics.hpp (splitmix64 counter hash, so the
voxels are identical): a random p = 0.5 mask and a sparse pore mask of 3500 balls (~3 %), times
scipy.ndimage.label (best of --repeat, single-threaded), runs porebench_bench's BM_CCL26_* at the
given thread count (and BM_CCL26_*_ITK, ITK's ConnectedComponentImageFilter), checks that the
component counts agree, and prints the ratios against the issue-5 goals:
scipy / ours >= 2.5 (random), >= 10 (pores); ITK / ours >= 1.
"""
import argparse
import json
import subprocess
import time

import numpy as np
from scipy import ndimage

M1, M2, GOLDEN = np.uint64(0xBF58476D1CE4E5B9), np.uint64(0x94D049BB133111EB), np.uint64(0x9E3779B97F4A7C15)


def splitmix64(x):
    with np.errstate(over="ignore"):
        z = x + GOLDEN
        z = (z ^ (z >> np.uint64(30))) * M1
        z = (z ^ (z >> np.uint64(27))) * M2
        return z ^ (z >> np.uint64(31))


def unit(x):
    return (splitmix64(x) >> np.uint64(11)).astype(np.float64) * 2.0 ** -53


def random_mask(n, p, seed):
    i = np.arange(n ** 3, dtype=np.uint64) + np.uint64(seed)
    return (unit(i) < p).reshape(n, n, n)


def pore_mask(n, count, seed):
    m = np.zeros((n, n, n), dtype=bool)
    b = 4 * np.arange(count, dtype=np.uint64) + np.uint64(seed)
    cx, cy, cz = unit(b) * n, unit(b + np.uint64(1)) * n, unit(b + np.uint64(2)) * n
    r = 1.5 + 3 * unit(b + np.uint64(3))
    for k in range(count):
        r0 = int(np.ceil(r[k]))
        lo = [max(0, int(c) - r0) for c in (cz[k], cy[k], cx[k])]
        hi = [min(n - 1, int(c) + r0) + 1 for c in (cz[k], cy[k], cx[k])]
        z, y, x = np.ogrid[lo[0]:hi[0], lo[1]:hi[1], lo[2]:hi[2]]
        inside = (x - cx[k]) ** 2 + (y - cy[k]) ** 2 + (z - cz[k]) ** 2 <= r[k] ** 2
        m[lo[0]:hi[0], lo[1]:hi[1], lo[2]:hi[2]] |= inside
    return m


def scipy_time(m, repeat):
    s = ndimage.generate_binary_structure(3, 3)
    best, n = float("inf"), 0
    for _ in range(repeat):
        t0 = time.perf_counter()
        _, n = ndimage.label(m, structure=s)
        best = min(best, time.perf_counter() - t0)
    return best, n


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("bench")
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--threads", type=int, default=1)
    a = ap.parse_args()
    out = subprocess.run([a.bench, f"--benchmark_filter=^BM_CCL26_.*/{a.threads}/", "--benchmark_format=json",
                          f"--benchmark_repetitions={a.repeat}", "--benchmark_report_aggregates_only=false"],
                         check=True, capture_output=True, text=True).stdout
    ours = {}
    for b in json.loads(out)["benchmarks"]:
        if b.get("run_type") == "aggregate":
            continue
        name = b["name"].split("/")[0]
        t = b["real_time"] / 1000.0  # ms -> s
        if name not in ours or t < ours[name][0]:
            ours[name] = (t, int(b.get("components", -1)))
    print(f"porebench threads {a.threads}; scipy single-threaded; best of {a.repeat}")
    for label, vol, goal in (("Random256", random_mask(256, 0.5, 1), 2.5),
                             ("Pores256", pore_mask(256, 3500, 2), 10.0)):
        ts, ns = scipy_time(vol, a.repeat)
        to, no = ours[f"BM_CCL26_{label}"]
        ti, ni = ours[f"BM_CCL26_{label}_ITK"]
        print(f"{label}: foreground {vol.mean() * 100:.2f} %, components scipy {ns} ours {no} itk {ni}"
              f"{'' if ns == no == ni else '  MISMATCH'}")
        print(f"  scipy {ts * 1e3:.1f} ms  ours {to * 1e3:.1f} ms  itk {ti * 1e3:.1f} ms")
        print(f"  scipy / ours = {ts / to:.2f} x (goal >= {goal:g}): {'met' if ts / to >= goal else 'not met'}")
        print(f"  itk / ours = {ti / to:.2f} x (goal >= 1): {'met' if ti / to >= 1 else 'not met'}")


if __name__ == "__main__":
    main()
