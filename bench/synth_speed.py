#!/usr/bin/python3
"""Synthesis of the 384^3 case: time and peak RSS of `porebench synth`, before against after
(issue 16 goal: >= 3x faster, peak RSS <= 2x the output volumes).

Usage: bench/synth_speed.py AFTER/porebench [--before BEFORE/porebench] [--n 384] [--threads 2]
                            [--rounds 1] [--projections 100] [--keep DIR]
The case: `porebench --threads T synth --preset gear-blank --set phantom.dims=N,N,N --projections P`
(the gear blank with its 3000-projection reference scan and one fast scan; at 384^3 it writes two
float32 scans of 226 MB and two uint8 volumes of 57 MB), each run under /usr/bin/time -v.
With --before, the two binaries run alternately (before, after, before, after ...: bench/peers/
peerlib.py), the script checks that both wrote the same files (the SHA-256 of every file in
manifest.json), and prints the median wall and CPU ratios; a side whose wall times spread wider than
25 % gets no ratio (exit 3). Per run: wall, user + system CPU, peak RSS, and the load average.
Peak RSS is compared with the largest output volume and with all output volumes together.
Exit 0 when the RSS goal holds (<= 2x the output volumes) and, with --before, the outputs agree and
the wall ratio is >= 3; 1 otherwise; 3 when a ratio was refused.
"""
import argparse
import json
import os
import shutil
import statistics
import sys
import tempfile

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "peers"))
import peerlib  # noqa: E402


def run(cli, args, out):
    shutil.rmtree(out, ignore_errors=True)
    cmd = [cli, "--quiet", "--threads", str(args.threads), "synth", "--preset", "gear-blank",
           "--set", f"phantom.dims={args.n},{args.n},{args.n}", "--projections", str(args.projections), "-o", out]
    load_before = peerlib.load()
    t = peerlib.time_v(cmd)
    wall, cpu, rss = t["wall"], t["cpu"], t["rss"]
    with open(os.path.join(out, "manifest.json")) as f:
        files = {e["file"]: e["sha256"] for e in json.load(f)["files"]}
    volumes = [os.path.getsize(os.path.join(out, n)) for n in files if n.endswith(".mha")]
    rec = {"wall": wall, "cpu": cpu, "rss": rss, "largest": max(volumes), "all": sum(volumes),
           "files": files, "load": (load_before, peerlib.load())}
    print(f"  {cli}: wall {wall:.1f} s, CPU {cpu:.1f} s, peak RSS {rss / 2**20:.0f} MiB = "
          f"{rss / rec['largest']:.2f}x the largest volume ({rec['largest'] / 2**20:.0f} MiB), "
          f"{rss / rec['all']:.2f}x all {len(volumes)} volumes ({rec['all'] / 2**20:.0f} MiB); "
          f"load {rec['load'][0]:.2f} -> {rec['load'][1]:.2f}", flush=True)
    return rec


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("after")
    ap.add_argument("--before")
    ap.add_argument("--n", type=int, default=384)
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--rounds", type=int, default=1)
    ap.add_argument("--projections", type=int, default=100)
    ap.add_argument("--keep", help="folder for the outputs (default: a temporary folder, removed)")
    args = ap.parse_args()
    work = args.keep or tempfile.mkdtemp(prefix="synth_speed_")
    os.makedirs(work, exist_ok=True)
    sides = {"after": args.after} if not args.before else {"before": args.before, "after": args.after}
    recs = {k: [] for k in sides}

    def side(label):
        def f():
            r = run(sides[label], args, os.path.join(work, label))
            recs[label].append(r)
            return r["wall"]
        return f

    print(f"synth gear-blank {args.n}^3, --projections {args.projections}, {args.threads} threads, "
          f"{args.rounds} round(s)")
    res = peerlib.alternate({k: side(k) for k in sides}, args.rounds)
    ok = True
    for label, rs in recs.items():
        worst = max(r["rss"] / r["all"] for r in rs)
        print(f"{label}: peak RSS <= {worst:.2f}x the output volumes (goal <= 2): {'met' if worst <= 2 else 'not met'}")
        ok &= worst <= 2
    status = 0 if ok else 1
    if args.before:
        same = recs["before"][-1]["files"] == recs["after"][-1]["files"]
        differ = [n for n in recs["after"][-1]["files"] if recs["before"][-1]["files"].get(n) !=
                  recs["after"][-1]["files"][n]]
        print("outputs: " + ("bit-identical (every file's SHA-256 in manifest.json)" if same else
                             f"DIFFER: {', '.join(differ)}"))
        cb = statistics.median(r["cpu"] for r in recs["before"])
        ca = statistics.median(r["cpu"] for r in recs["after"])
        print(f"CPU (user + system) medians: before {cb:.1f} s, after {ca:.1f} s = {cb / ca:.2f} x")
        ratio, verdict = peerlib.ratio(res, "before", "after", goal=3.0, what="wall before / after")
        if verdict == "refused":
            status = peerlib.REFUSED_EXIT
        elif verdict != "met" or not same:
            status = 1
    if not args.keep:
        shutil.rmtree(work, ignore_errors=True)
    return status


if __name__ == "__main__":
    sys.exit(main())
