#!/usr/bin/python3
"""Sauvola in 3D on the same 256^3 float volume: scikit-image 0.19 threshold_sauvola vs porebench.

Usage: sauvola_vs_skimage.py POREBENCH [--bench POREBENCH_BENCH] [--threads N] [--repeat N] [--size N]
  POREBENCH        the porebench command (e.g. build/porebench)
  --bench          also run porebench_bench's BM_LocalSauvolaW15/W63 (1 thread) for the window ratio
  --threads        porebench worker threads (default 1: numpy is single-threaded, so 1 is like for like)

Issue 4 goals: ours >= 1x scikit-image; ours at window 63 <= 1.2x ours at window 15; peak memory of a
local method <= input + 2 float volumes. Times are the best of --repeat runs. scikit-image's time
is threshold_sauvola plus the compare (vol < T); ours is the method's runtime_s from `segment
--json` (window statistics, thresholds, compare and pore extraction; file I/O excluded).
Peak memory is the maximum resident set of the whole `segment` process (/usr/bin/time), which also
holds the volume as read and its float copy, i.e. two input volumes before the method starts.
"""
import argparse
import json
import os
import subprocess
import tempfile
import time

import numpy as np
from skimage import filters


def volume(n):
    # Dark spheres on a 32-voxel lattice in a material drifting along x, plus noise (as bench_local.cpp).
    rng = np.random.default_rng(4)
    z, y, x = np.ogrid[0:n, 0:n, 0:n]
    pore = ((x % 32 - 16) ** 2 + (y % 32 - 16) ** 2 + (z % 32 - 16) ** 2) < 25
    v = np.where(pore, 0.15, 0.45 + 0.3 * x / float(n)) + rng.normal(0, 0.03, (n, n, n))
    return v.astype("<f4")


def skimage_time(vol, window, k, r, repeat):
    best = float("inf")
    for _ in range(repeat):
        t0 = time.perf_counter()
        air = vol < filters.threshold_sauvola(vol, window_size=window, k=k, r=r)
        best = min(best, time.perf_counter() - t0)
    return best, int(air.sum())


def ours_time(cli, raw, n, window, k, r, threads, repeat, tmp):
    best, rss_kb, air = float("inf"), 0, None
    for _ in range(repeat):
        js = os.path.join(tmp, "p.json")
        cmd = ["/usr/bin/time", "-f", "%M", cli, "--threads", str(threads), "--quiet", "segment", "sauvola", raw,
               "--raw-dims", f"{n},{n},{n}", "--raw-type", "float32", "--spacing", "1,1,1",
               "-o", os.path.join(tmp, "p.mha"), "--json", js,
               "--set", f"window={window}", "--set", f"k={k}", "--set", f"r={r}"]
        res = subprocess.run(cmd, check=True, capture_output=True, text=True)
        rss_kb = max(rss_kb, int(res.stderr.strip().splitlines()[-1]))
        with open(js) as f:
            rec = json.load(f)
        best = min(best, rec["runtime_s"])
    return best, rss_kb


def bench_ratio(binary):
    out = subprocess.run([binary, "--benchmark_filter=^BM_LocalSauvolaW(15|63)/1/", "--benchmark_format=json"],
                         check=True, capture_output=True, text=True).stdout
    times = {b["name"].split("/")[0]: b["real_time"] for b in json.loads(out)["benchmarks"]}
    return times["BM_LocalSauvolaW63"] / times["BM_LocalSauvolaW15"], times


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("porebench")
    ap.add_argument("--bench")
    ap.add_argument("--threads", type=int, default=1)
    ap.add_argument("--repeat", type=int, default=2)
    ap.add_argument("--size", type=int, default=256)
    a = ap.parse_args()
    n, k, r = a.size, 0.2, 0.4
    vol = volume(n)
    input_mb = vol.nbytes / 2**20
    with tempfile.TemporaryDirectory() as tmp:
        raw = os.path.join(tmp, "v.raw")
        vol.tofile(raw)
        ours = {}
        for w in (15, 63):
            sk, _ = skimage_time(vol, w, k, r, a.repeat)
            t, rss = ours_time(a.porebench, raw, n, w, k, r, a.threads, a.repeat, tmp)
            ours[w] = t
            ratio = sk / t
            print(f"window {w}: scikit-image {sk:.3f} s, porebench ({a.threads} thread(s)) {t:.3f} s: "
                  f"{ratio:.2f} x (goal >= 1): {'met' if ratio >= 1 else 'not met'}; "
                  f"porebench peak RSS {rss / 1024:.0f} MB (input {input_mb:.0f} MB; the process holds "
                  f"2 input copies before the method: budget 2 copies + 2 float volumes = {4 * input_mb:.0f} MB)")
    wr = ours[63] / ours[15]
    print(f"porebench window 63 / window 15 = {wr:.2f} x (goal <= 1.2): {'met' if wr <= 1.2 else 'not met'}")
    if a.bench:
        br, times = bench_ratio(a.bench)
        print(f"porebench_bench BM_LocalSauvolaW63 / W15 (1 thread) = {br:.2f} x "
              f"({times['BM_LocalSauvolaW63']:.0f} / {times['BM_LocalSauvolaW15']:.0f} ms) (goal <= 1.2): "
              f"{'met' if br <= 1.2 else 'not met'}")


if __name__ == "__main__":
    main()
