#!/usr/bin/python3
"""Times scikit-image 0.19 radon/iradon against porebench's CT kernels on the same case.

Usage: ct_vs_skimage.py PATH/TO/porebench_bench [--repeat 5]
Case: a 256 x 256 Shepp-Logan slice, 400 angles over 180 degrees, ramp filter, linear
interpolation (what bench/bench_ct.cpp runs). scikit-image runs as it comes (one core);
porebench at 1 and 2 threads. Prints times and the ratio scikit-image / porebench for
forward projection (radon vs Joseph projector) and reconstruction (iradon vs filter +
back-projection). Goal of issue 3: >= 20x for both.
Both sides report the best of --repeat runs (the same statistic, least disturbed by other
load on the machine); the load average before and after is printed with the figures.
"""
import os
import json
import subprocess
import sys
import time

import numpy as np
from skimage.data import shepp_logan_phantom
from skimage.transform import iradon, radon, resize


def best_of(f, repeat):
    best = float("inf")
    for _ in range(repeat):
        t0 = time.perf_counter()
        f()
        best = min(best, time.perf_counter() - t0)
    return best


def main():
    bench = sys.argv[1]
    repeat = int(sys.argv[sys.argv.index("--repeat") + 1]) if "--repeat" in sys.argv else 5
    load_before = os.getloadavg()[0]
    img = resize(shepp_logan_phantom(), (256, 256), anti_aliasing=True)
    theta = np.arange(400) * 180.0 / 400
    sino = radon(img, theta=theta, circle=True)
    t_radon = best_of(lambda: radon(img, theta=theta, circle=True), repeat)
    t_iradon = best_of(lambda: iradon(sino, theta=theta, filter_name="ramp", interpolation="linear", circle=True), repeat)

    out = subprocess.run([bench, "--benchmark_filter=BM_(ForwardProjectJoseph|FbpFilterAndBackProject)/",
                          "--benchmark_format=json", "--benchmark_repetitions=%d" % repeat],
                         check=True, capture_output=True, text=True).stdout
    ours = {}
    for b in json.loads(out)["benchmarks"]:
        if b.get("run_type") != "iteration":
            continue
        name = b["run_name"].split("/")
        scale = {"ns": 1e-9, "us": 1e-6, "ms": 1e-3, "s": 1.0}[b["time_unit"]]
        key = (name[0], int(name[1]))
        ours[key] = min(ours.get(key, float("inf")), b["real_time"] * scale)
    updates = 256 * 256 * 400
    print("case: 256x256 slice, 400 angles; times in ms, best of %d on both sides; load average %.2f before, %.2f after"
          % (repeat, load_before, os.getloadavg()[0]))
    for label, sk, key in (("forward projection", t_radon, "BM_ForwardProjectJoseph"),
                           ("reconstruction (FBP)", t_iradon, "BM_FbpFilterAndBackProject")):
        for threads in (1, 2):
            t = ours[(key, threads)]
            print("%-22s scikit-image %8.1f ms   porebench %d thread(s) %7.2f ms (%.2e updates/s)   ratio %.1fx"
                  % (label, sk * 1e3, threads, t * 1e3, updates / t, sk / t))


if __name__ == "__main__":
    main()
