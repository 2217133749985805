#!/usr/bin/python3
"""OpenMP wait policy on a shared machine: FBP (BM_FbpFilterAndBackProject, 256^2 x 400 angles) at
2 threads under each policy, in alternating rounds (bench/peers/peerlib.py), in three settings:
  free     - as the machine is (other users' load included; the load average is printed)
  taskset  - both threads on one CPU (taskset -c 0): more threads than CPUs
  busy     - a competing busy loop pinned to CPU 1 for the whole run
Policies: passive (OMP_WAIT_POLICY=passive, porebench's default, core/parallel.cpp), spin10k
(GOMP_SPINCOUNT=10000), spin300k (GOMP_SPINCOUNT=300000, libgomp's default spin count when no
policy is set; value from GCC's libgomp manual, from memory), active (OMP_WAIT_POLICY=active).
The 1-thread run is the yardstick: 2 threads should never be slower than it.
Usage: bench/omp_wait.py BENCH_BINARY [--rounds N] [--settings free,taskset,busy]
"""
import argparse
import os
import subprocess
import sys

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "peers"))
import peerlib  # noqa: E402

POLICIES = {"passive": {"OMP_WAIT_POLICY": "passive"}, "spin10k": {"GOMP_SPINCOUNT": "10000"},
            "spin300k": {"GOMP_SPINCOUNT": "300000"}, "active": {"OMP_WAIT_POLICY": "active"}}


def side(binary, threads, env, prefix):
    e = {k: v for k, v in os.environ.items() if k not in ("OMP_WAIT_POLICY", "GOMP_SPINCOUNT")}
    e.update(env)

    def run():
        out = subprocess.run(prefix + [binary, f"--benchmark_filter=^BM_FbpFilterAndBackProject/{threads}/",
                                       "--benchmark_format=json", "--benchmark_min_time=0.3"],
                             check=True, capture_output=True, text=True, env=e).stdout
        import json
        b = [x for x in json.loads(out)["benchmarks"] if x.get("run_type", "iteration") == "iteration"][0]
        return b["real_time"] * {"ms": 1e-3, "us": 1e-6, "ns": 1e-9, "s": 1.0}[b["time_unit"]]
    return run


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("bench")
    ap.add_argument("--rounds", type=int, default=5)
    ap.add_argument("--settings", default="free,taskset,busy")
    a = ap.parse_args()
    for setting in a.settings.split(","):
        prefix = ["taskset", "-c", "0"] if setting == "taskset" else []
        busy = None
        if setting == "busy":
            busy = subprocess.Popen(["taskset", "-c", "1", "/bin/sh", "-c", "while :; do :; done"])
        try:
            sides = {"1 thread": side(a.bench, 1, POLICIES["passive"], prefix)}
            sides.update({f"2 threads {p}": side(a.bench, 2, env, prefix) for p, env in POLICIES.items()})
            run = peerlib.alternate(sides, a.rounds)
        finally:
            if busy:
                busy.kill()
                busy.wait()
        print(f"{setting}: load {run['load'][0]:.2f} -> {run['load'][1]:.2f}")
        for k, ts in run["times"].items():
            print("  " + peerlib.summary(k, ts))


if __name__ == "__main__":
    main()
