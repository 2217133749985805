#!/usr/bin/python3
"""3D connected components, 26-connectivity: scipy.ndimage.label vs porebench's label_components.

Usage: ccl_vs_scipy.py POREBENCH_BENCH [--rounds N] [--threads 1|2]
Builds the same two 256^3 volumes as bench/bench_metrics.hpp (splitmix64 counter hash, so the
voxels are identical): a random p = 0.5 mask and a sparse pore mask of 3500 balls (~3 %). In
alternating rounds (bench/peers/peerlib.py) it times scipy.ndimage.label (single-threaded),
porebench_bench's BM_CCL26_* at the given thread count and BM_CCL26_*_ITK (ITK's
ConnectedComponentImageFilter), checks that the component counts agree, and prints the ratios of
medians against the issue-5 goals: scipy / ours >= 2.5 (random), >= 10 (pores); ITK / ours >= 1.
A ratio is refused when a side's spread is wider than 25 % (exit 3).
"""
import argparse
import sys

import numpy as np
from scipy import ndimage

import peerlib

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


def scipy_side(m):
    s = ndimage.generate_binary_structure(3, 3)
    return lambda: peerlib.wall(lambda: ndimage.label(m, structure=s)[1])


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("bench")
    ap.add_argument("--rounds", type=int, default=5)
    ap.add_argument("--threads", type=int, default=1)
    a = ap.parse_args()
    print(f"porebench threads {a.threads}; scipy single-threaded; medians of {a.rounds} alternating rounds")
    verdicts = []
    for label, vol, goal in (("Random256", random_mask(256, 0.5, 1), 2.5),
                             ("Pores256", pore_mask(256, 3500, 2), 10.0)):
        ours, itk = f"BM_CCL26_{label}/{a.threads}", f"BM_CCL26_{label}_ITK/{a.threads}"
        run = peerlib.alternate({"scipy": scipy_side(vol), "ours": peerlib.bench_side(a.bench, ours),
                                 "itk": peerlib.bench_side(a.bench, itk)}, a.rounds)
        ns = run["extra"]["scipy"]
        no, ni = (int(run["extra"][k].get("components", -1)) for k in ("ours", "itk"))
        print(f"{label}: foreground {vol.mean() * 100:.2f} %, components scipy {ns} ours {no} itk {ni}"
              f"{'' if ns == no == ni else '  MISMATCH'}")
        verdicts.append(peerlib.ratio(run, "scipy", "ours", goal)[1])
        verdicts.append(peerlib.ratio(run, "itk", "ours", 1)[1])
        if not ns == no == ni:
            verdicts.append("not met")
    sys.exit(peerlib.exit_status(verdicts))


if __name__ == "__main__":
    main()
