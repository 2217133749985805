#!/usr/bin/python3
"""Start-up time of the command line (issue 16 goal: <= 50 ms for `methods`, `info` and `score`).

Usage: bench/startup.py PATH/TO/porebench [--rounds N]
Runs each command on tiny inputs (16^3 MetaImage masks written here) in alternating rounds
(methods, info, score, methods, ...), each under /usr/bin/time, and prints per command the median
wall time, the median CPU time (user + sys: what the process itself costs, less sensitive to other
users' load), the peak RSS and the number of shared libraries the process maps (from a run with
LD_DEBUG=files). The load average is printed with the figures; /bin/true is the floor.
"""
import argparse
import os
import statistics
import subprocess
import sys
import tempfile

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "peers"))
import peerlib  # noqa: E402


def write_mha(path, n, fill):
    header = ("ObjectType = Image\nNDims = 3\nBinaryData = True\nBinaryDataByteOrderMSB = False\n"
              f"DimSize = {n} {n} {n}\nElementSpacing = 0.1 0.1 0.1\nElementType = MET_UCHAR\n"
              "ElementDataFile = LOCAL\n")
    with open(path, "wb") as f:
        f.write(header.encode())
        f.write(bytes(fill(i) for i in range(n ** 3)))


def timed(cmd):
    def run():
        r = subprocess.run(["/usr/bin/time", "-f", "%e %U %S %M"] + cmd, capture_output=True, text=True)
        if r.returncode != 0:
            raise SystemExit(f"startup: {' '.join(cmd)} failed: {r.stderr[-500:]}")
        wall, user, sys_, rss = r.stderr.strip().splitlines()[-1].split()
        return float(wall), (float(user) + float(sys_), int(rss))
    return run


def libraries(cmd):
    env = dict(os.environ, LD_DEBUG="files")
    r = subprocess.run(cmd, capture_output=True, text=True, env=env)
    return sum(1 for line in r.stderr.splitlines() if "calling init:" in line)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("porebench")
    ap.add_argument("--rounds", type=int, default=7)
    a = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        ref, pred = os.path.join(tmp, "ref.mha"), os.path.join(tmp, "pred.mha")
        write_mha(ref, 16, lambda i: 1 if (i * 2654435761) % 97 < 5 else 0)
        write_mha(pred, 16, lambda i: 1 if (i * 2654435761) % 89 < 5 else 0)
        cmds = {"true": ["/bin/true"],
                "methods": [a.porebench, "methods"],
                "info": [a.porebench, "info", ref],
                "score": [a.porebench, "score", "--pred", pred, "--ref", ref, "--bootstrap", "0"]}
        cpu = {k: [] for k in cmds}
        rss = {}

        def side(k):
            t = timed(cmds[k])

            def run():
                w, (c, m) = t()
                cpu[k].append(c)
                rss[k] = m
                return w
            return run
        run = peerlib.alternate({k: side(k) for k in cmds}, a.rounds)
        print(f"start-up, medians of {a.rounds} alternating rounds; load {run['load'][0]:.2f} -> {run['load'][1]:.2f}")
        verdicts = []
        for k, cmd in cmds.items():
            w = statistics.median(run["times"][k])
            c = statistics.median(cpu[k])
            line = (f"  {k:<8} wall {w * 1e3:6.0f} ms (spread {peerlib.spread(run['times'][k]) * 100:3.0f} %)  "
                    f"cpu {c * 1e3:5.0f} ms  rss {rss[k] / 1024:5.1f} MB  libraries {libraries(cmd):4d}")
            if k != "true":
                v = "met" if w <= 0.05 else "not met"
                verdicts.append(v)
                line += f"  (goal wall <= 50 ms: {v})"
            print(line)
    sys.exit(peerlib.exit_status(verdicts))


if __name__ == "__main__":
    main()
