#!/usr/bin/python3
"""Issue 17: segmenting by slabs at no less than 80 % of the in-memory path's throughput on 512^3.

Runs two sides in alternating rounds (bench/peers/peerlib.py: medians, load before and after, the
ratio refused when a side's spread is wider than 25 %), each a whole `porebench segment` process
under /usr/bin/time -v (reading, segmenting, writing the mask; wall time and peak RSS):
  in memory: segment METHOD SMALL/test.mha -o ...                      (default --memory-limit)
  by slabs:  segment METHOD SLABS/test.mha -o ... --memory-limit 64M   (forced by slabs)
A side's time is seconds per 10^6 voxels of its volume, so the printed ratio
(in memory) / (by slabs) is the throughput by slabs over the throughput in memory; goal >= 0.8.
Before every timed run, of either side, 2 GiB of memory are touched and freed, untimed
(peerlib.settle_memory: on this VM freed memory goes back to the hypervisor within seconds). One
untimed round of each side comes first (page cache). When SLABS is SMALL, the two masks are
compared voxel for voxel after the rounds.

usage: stream_vs_memory.py POREBENCH SMALL SLABS [METHOD ...] [--rounds N] [--goal G]
  SMALL/test.mha: the 512^3 scan of `bench/make_large_pair.py SMALL 512 512 512`; SLABS/test.mha:
  the scan segmented by slabs (the 2048 x 2048 x 1024 scan of bench/stream_large.sh, or SMALL).
  METHOD: default median+otsu. Exit 0 met, 1 not met, 3 refused.
"""
import argparse
import os
import re
import sys

import peerlib


def voxels(path):
    """Voxels of an uncompressed MetaImage, from its DimSize line."""
    with open(path, "rb") as f:
        head = f.read(4096).decode("latin-1")
    dims = [int(x) for x in re.search(r"DimSize = ([0-9 ]+)", head).group(1).split()]
    return dims[0] * dims[1] * dims[2]


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("porebench")
    ap.add_argument("small")
    ap.add_argument("slabs")
    ap.add_argument("methods", nargs="*", default=["median+otsu"])
    ap.add_argument("--rounds", type=int, default=5)
    ap.add_argument("--goal", type=float, default=0.8)
    a = ap.parse_args()
    pb = os.path.abspath(a.porebench)
    small, slabs = os.path.join(a.small, "test.mha"), os.path.join(a.slabs, "test.mha")
    out_mem, out_slab = os.path.join(a.small, "peer-mem.mha"), os.path.join(a.slabs, "peer-slabs.mha")
    n_small, n_slabs = voxels(small), voxels(slabs)
    verdicts = []
    for method in a.methods:
        rss = {}

        def side(label, cmd, n):
            def run():
                peerlib.settle_memory()
                r = peerlib.time_v(cmd)
                rss[label] = max(rss.get(label, 0), r["rss"])
                return r["wall"] / n * 1e6
            return run
        sides = {"in memory": side("in memory", [pb, "segment", method, small, "-o", out_mem], n_small),
                 "by slabs": side("by slabs", [pb, "segment", method, slabs, "-o", out_slab, "--memory-limit", "64M"],
                                  n_slabs)}
        for f in sides.values():  # untimed: page cache
            f()
        print(f"{method}: in memory {small} ({n_small} voxels), by slabs {slabs} ({n_slabs} voxels); "
              "times in ms per 10^6 voxels")
        run = peerlib.alternate(sides, a.rounds)
        _, verdict = peerlib.ratio(run, "in memory", "by slabs", a.goal,
                                   what="throughput by slabs / in memory")
        print(f"  peak RSS: in memory {rss['in memory'] / 2**20:.0f} MiB, by slabs {rss['by slabs'] / 2**20:.0f} MiB")
        if os.path.abspath(small) == os.path.abspath(slabs):
            with open(out_mem, "rb") as f1, open(out_slab, "rb") as f2:
                same = f1.read()[-n_small:] == f2.read()[-n_small:]
            print("  masks: " + ("the same voxels" if same else "VOXELS DIFFER"))
            if not same:
                verdict = "not met"
        verdicts.append(verdict)
        for p in (out_mem, out_slab):
            if os.path.exists(p):
                os.remove(p)
    sys.exit(peerlib.exit_status(verdicts))


if __name__ == "__main__":
    main()
