#!/usr/bin/python3
"""Peak RSS of `porebench score` against its inputs (issue 16 goal: peak RSS <= 2x the inputs).

Usage: bench/score_rss.py PATH/TO/porebench [--n 384] [--threads 2] [--keep DIR]
Writes three uint8 MetaImage files of N^3 voxels (pred, ref, part mask) for two cases and runs
`porebench --threads T score --pred --ref --roi --json` under /usr/bin/time -v on each:
  clean: the pair of bench/peers/score_python_vs_cli.sh (bench/peers/score_pair.py): a cylinder
         part with spherical pores, the prediction moves them by up to one voxel, misses one in
         ten, adds single-voxel false calls;
  noisy: the same pair, plus salt noise in the prediction (each part voxel with p = 0.018): about
         500k predicted components at 384^3.
Prints per case the peak RSS, the inputs (3 N^3 bytes), their ratio, the wall and CPU time, the
predicted pore count and the load average before and after. Exit 0 when every ratio <= 2, else 1.
"""
import argparse
import json
import os
import subprocess
import sys
import tempfile

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "peers"))
import peerlib  # noqa: E402
from score_pair import make_pair  # noqa: E402


def write_mha(path, a):
    n = a.shape[0]
    header = ("ObjectType = Image\nNDims = 3\nBinaryData = True\nBinaryDataByteOrderMSB = False\n"
              f"DimSize = {n} {n} {n}\nElementSpacing = 0.01 0.01 0.01\nElementType = MET_UCHAR\n"
              "ElementDataFile = LOCAL\n")
    with open(path, "wb") as f:
        f.write(header.encode())
        f.write(np.ascontiguousarray(a, dtype=np.uint8).tobytes())


def run(cli, threads, d, tag):
    out = os.path.join(d, f"{tag}.json")
    t = peerlib.time_v([cli, "--quiet", "--threads", str(threads), "score", "--pred", f"{d}/{tag}_pred.mha",
                        "--ref", f"{d}/ref.mha", "--roi", f"{d}/part.mha", "--json", out])
    with open(out) as f:
        rec = json.load(f)
    return t["rss"] // 1024, t["wall"], t["cpu"], rec["pores"]["pores_pred"]


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("cli")
    ap.add_argument("--n", type=int, default=384)
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--keep", help="write the inputs here and keep them")
    a = ap.parse_args()
    d = a.keep or tempfile.mkdtemp(prefix="score_rss_")
    os.makedirs(d, exist_ok=True)
    rng = np.random.default_rng(16)
    part, ref, pred = make_pair(a.n, rng)
    write_mha(f"{d}/part.mha", part.astype(np.uint8))
    write_mha(f"{d}/ref.mha", ref)
    write_mha(f"{d}/clean_pred.mha", pred)
    noise = (rng.random(pred.shape, dtype=np.float32) < 0.018) & (part != 0)
    write_mha(f"{d}/noisy_pred.mha", pred | noise)
    del part, ref, pred, noise
    inputs = 3 * a.n ** 3
    ok = True
    for tag in ("clean", "noisy"):
        l0 = peerlib.load()
        rss_kb, wall, cpu, pores = run(a.cli, a.threads, d, tag)
        ratio = rss_kb * 1024 / inputs
        ok = ok and ratio <= 2
        print(f"{tag} {a.n}^3, {a.threads} threads: peak RSS {rss_kb / 1024:.0f} MiB, inputs {inputs / 2**20:.0f} MiB, "
              f"ratio {ratio:.2f} (goal <= 2); wall {wall:.2f} s, CPU {cpu:.2f} s; predicted pores {pores}; "
              f"load {l0:.2f} -> {peerlib.load():.2f}")
    if not a.keep:
        subprocess.run(["rm", "-rf", d])
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
