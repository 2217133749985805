"""Shared timing for the peer scripts in bench/peers/: alternate the sides, take medians, say the
load, and refuse a ratio when the runs disagree.

On a shared machine, load comes and goes in waves: timing one side fully and then the other lets a
wave land on one side only (ratios swung 4x that way). So every script here runs its sides in
rounds, A B A B ..., each round one run of each side, and compares medians. The spread of a side
is (max - min) / median over its runs; when either side's spread is wider than MAX_SPREAD the ratio
is refused (printed as such, exit status 3) rather than printed as if it were a measurement.
Every report line carries the load average (1 min) before and after.

Used by: bench_ratio.py, ccl_vs_scipy.py, sauvola_vs_skimage.py, otsu_vs_itk.sh, neural_vs_pytorch.py,
score_python_vs_cli.sh and stream_vs_memory.py (these two also call settle_memory before every timed
run); bench/score_rss.py and bench/synth_speed.py
(time_v: one command under /usr/bin/time -v).
"""
import json
import os
import re
import statistics
import subprocess
import time

MAX_SPREAD = 0.25  # issue 16: refuse a ratio when a side's spread is wider than 25 %
REFUSED_EXIT = 3

_SCALE = {"ns": 1e-9, "us": 1e-6, "ms": 1e-3, "s": 1.0}


def load():
    """The 1-minute load average."""
    return os.getloadavg()[0]


def time_v(cmd):
    """Runs cmd (a list) under GNU time's verbose mode; exits naming the command if it fails.
    Returns {"wall": s, "cpu": user + system s, "rss": peak resident bytes} (fields as GNU time
    prints them: "Elapsed (wall clock) time (h:mm:ss or m:ss)", "Maximum resident set size (kbytes)")."""
    p = subprocess.run(["/usr/bin/time", "-v"] + list(cmd), capture_output=True, text=True)
    if p.returncode != 0:
        raise SystemExit(f"{' '.join(cmd)} failed ({p.returncode}):\n{p.stderr}")

    def field(name):
        return re.search(re.escape(name) + r": (.*)", p.stderr).group(1)
    parts = [float(x) for x in field("Elapsed (wall clock) time (h:mm:ss or m:ss)").split(":")]
    return {"wall": sum(v * 60 ** i for i, v in enumerate(reversed(parts))),
            "cpu": float(field("User time (seconds)")) + float(field("System time (seconds)")),
            "rss": int(field("Maximum resident set size (kbytes)")) * 1024}


def wall(f):
    """Runs f() once; returns (seconds, result)."""
    t0 = time.perf_counter()
    r = f()
    return time.perf_counter() - t0, r


def bench_once(binary, pattern, extra=()):
    """Runs porebench_bench once on the benchmarks matching the regex `pattern`.

    Returns {full benchmark name: {"s": real time in seconds, "counters": the other fields}}."""
    out = subprocess.run([binary, f"--benchmark_filter={pattern}", "--benchmark_format=json", *extra],
                         check=True, capture_output=True, text=True).stdout
    res = {}
    for b in json.loads(out)["benchmarks"]:
        if b.get("run_type", "iteration") != "iteration":
            continue
        res[b["name"]] = {"s": b["real_time"] * _SCALE[b["time_unit"]], "counters": b}
    return res


def bench_side(binary, name):
    """A side for alternate(): one run of one benchmark, given by its full name (BM_X/2/real_time)
    or by a prefix ending at a '/' (BM_X, BM_X/2) that matches exactly one benchmark."""
    import re
    pattern = "^" + re.escape(name) + "(/|$)"

    def run():
        r = bench_once(binary, pattern)
        if len(r) != 1:
            raise SystemExit(f"peerlib: {name} matches {len(r)} benchmarks in {binary}: {sorted(r)}")
        (b,) = r.values()
        return b["s"], b["counters"]
    return run


def alternate(sides, rounds):
    """Runs the sides in turn, `rounds` times: A B A B ...

    `sides` maps a label to a function returning seconds, or (seconds, extra). Returns
    {"times": {label: [s, ...]}, "extra": {label: last extra}, "load": (before, after)}."""
    before = load()
    times = {k: [] for k in sides}
    extra = {}
    for _ in range(rounds):
        for k, f in sides.items():
            r = f()
            if isinstance(r, tuple):
                r, extra[k] = r
            times[k].append(float(r))
    return {"times": times, "extra": extra, "load": (before, load())}


def settle_memory(nbytes=2 << 30):
    """Touches and frees `nbytes` of fresh memory, untimed, just before a timed run.

    This machine is a VM whose kernel reports free memory back to the hypervisor
    (page_reporting.page_reporting_order=11 on its command line): a page freed for a few seconds
    goes back to the host, and the next process to touch it waits for the host to back it again.
    That wait varies tenfold from run to run (touching the same 1.7 GB: 0.1 to 4 s of system time)
    and lands hardest on a side that starts a new process and touches much fresh memory. Touching
    memory just before each timed run (every side alike) leaves recently backed pages on the free
    lists for the run; the kernel still zeroes every page the run touches (that cost stays in)."""
    import numpy as np
    a = np.ones(nbytes, np.uint8)
    del a


def spread(ts):
    m = statistics.median(ts)
    return (max(ts) - min(ts)) / m if m > 0 else float("inf")


def summary(label, ts):
    runs = ", ".join(f"{t * 1e3:.0f}" for t in ts)
    return f"{label} median {statistics.median(ts) * 1e3:.2f} ms (n={len(ts)}, spread {spread(ts) * 100:.0f} %: {runs})"


def ratio(run, slow, fast, goal=None, higher_is="faster", what=None):
    """Prints the medians and `slow / fast` for one alternate() run, or refuses it.

    Returns (ratio or None, verdict) where verdict is "met", "not met", "refused" or "" (no goal)."""
    ts, tf = run["times"][slow], run["times"][fast]
    lb, la = run["load"]
    what = what or f"{slow} / {fast}"
    print(f"  {summary(slow, ts)}; {summary(fast, tf)}; load {lb:.2f} -> {la:.2f}")
    wide = [k for k in (slow, fast) if spread(run["times"][k]) > MAX_SPREAD]
    if wide:
        print(f"  {what}: REFUSED (spread wider than {MAX_SPREAD * 100:.0f} % on {', '.join(wide)}; "
              f"run again when the load is lower)")
        return None, "refused"
    r = statistics.median(ts) / statistics.median(tf)
    line = f"  {what} = {r:.2f} x"
    verdict = ""
    if goal is not None:
        verdict = "met" if r >= goal else "not met"
        line += f" (goal >= {goal:g}): {verdict}"
    print(line + f" [medians of {len(ts)} alternating rounds, load {lb:.2f} -> {la:.2f}]")
    return r, verdict


def exit_status(verdicts):
    """0 when every goal is met, REFUSED_EXIT when any ratio was refused, else 1."""
    if "refused" in verdicts:
        return REFUSED_EXIT
    return 0 if all(v in ("met", "") for v in verdicts) else 1
