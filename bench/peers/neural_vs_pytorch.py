#!/usr/bin/python3
"""Neural-family engines against PyTorch CPU on the same model, input shape and thread count
(issue 13). Each side runs in its own process; the sides alternate, ROUNDS rounds; each process
times 2 warm-ups + 5 runs and reports its median; the ratio is the median of the round ratios
(whole processes here sometimes run in two speed modes 1.5x apart: one-process A/B is not trusted).

  bench/peers/neural_vs_pytorch.py build/porebench_bench [--rounds 5] [--threads 1 2]

2D: the shipped models/gear-unet-released (ONNX through OpenCV dnn in porebench_bench
BM_NeuralForward, batch 4) vs the same weights (weights.pt) in eager PyTorch.
3D: a random-weight 3D U-Net (2 levels, base 8, 64^3 patch, batch 1) frozen to TorchScript,
through LibTorch (BM_Neural3DForward) vs the same file in Python (torch.jit.load +
optimize_for_inference). PyTorch gets the allocator tunables that stop its per-call page faults
(GLIBC_TUNABLES, models/ENGINES.md); our engine sets the same with mallopt.
Prints "PyTorch ms / ours ms" per model and thread count (> 1: ours faster), with the goals of
issue 13 (OpenCV dnn >= 1x; LibTorch within 5 %: >= 0.95x), through peerlib: sides alternate, the
ratio is of the medians, refused (exit 3) when a side's spread is wider than 25 %.
"""
import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time

import peerlib

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.abspath(os.path.join(HERE, "..", ".."))
TUNABLES = "glibc.malloc.mmap_max=0:glibc.malloc.trim_threshold=17179869184"


def torch_side(kind, path, threads):
    import torch
    torch.set_num_threads(threads)
    sys.path.insert(0, os.path.join(ROOT, "models"))
    if kind == "2d":
        from unet import UNet
        card = json.load(open(path))
        arch = card["training"]["unet"]
        model = UNet(dims=2, in_channels=arch["in_channels"], base=arch["base"], levels=arch["levels"], sigmoid=True,
                     separable=arch.get("separable", False))
        model.load_state_dict(torch.load(os.path.join(os.path.dirname(path), "weights.pt")))
        model.eval()
        t = card["input"]["tile"]
        x = torch.rand(4, arch["in_channels"], t[0], t[1])
    else:
        model = torch.jit.optimize_for_inference(torch.jit.load(path))
        x = torch.rand(1, 1, 64, 64, 64)
    times = []
    with torch.no_grad():
        for i in range(7):
            t0 = time.perf_counter()
            model(x)
            if i >= 2:
                times.append((time.perf_counter() - t0) * 1e3)
    print(statistics.median(times))


def ours(binary, name, threads, env):
    out = subprocess.run([binary, f"--benchmark_filter=^{name}/threads:{threads}(/real_time)?$", "--benchmark_format=json",
                          "--benchmark_repetitions=5", "--benchmark_report_aggregates_only=true"],
                         check=True, capture_output=True, text=True, env=env).stdout
    for b in json.loads(out)["benchmarks"]:
        if b.get("aggregate_name") == "median":
            if b.get("error_occurred"):
                sys.exit(f"{name}: {b.get('error_message')}")
            return b["real_time"]  # ms (the benchmark's unit)
    sys.exit(f"{name}: no median in the benchmark output")


def pytorch(kind, path, threads):
    env = dict(os.environ, GLIBC_TUNABLES=TUNABLES)
    out = subprocess.run(["/usr/bin/python3", __file__, "--side", kind, path, str(threads)], check=True,
                         capture_output=True, text=True, env=env).stdout
    return float(out.strip().splitlines()[-1])


def make_3d(folder):
    import torch
    sys.path.insert(0, os.path.join(ROOT, "models"))
    from unet import UNet, export_torchscript
    torch.manual_seed(3)
    m = UNet(dims=3, in_channels=1, base=8, levels=2, sigmoid=True)
    path = os.path.join(folder, "model.pt")
    export_torchscript(m, torch.zeros(1, 1, 64, 64, 64), path)
    card = {"name": "bench3d", "version": "0", "format": "torchscript", "file": "model.pt",
            "input": {"kind": "patch", "slices": 1, "tile": [64, 64, 64], "overlap": 0.25,
                      "normalise": {"mode": "zscore"}},
            "output": {"kind": "probability", "channel": 0, "pore_threshold": 0.5},
            "training": {"data": "random weights (benchmark)"}, "intended_use": "benchmark", "licence": "same as porebench"}
    json.dump(card, open(os.path.join(folder, "card.json"), "w"))
    return path, os.path.join(folder, "card.json")


def main():
    if len(sys.argv) > 1 and sys.argv[1] == "--side":
        torch_side(sys.argv[2], sys.argv[3], int(sys.argv[4]))
        return
    ap = argparse.ArgumentParser()
    ap.add_argument("binary")
    ap.add_argument("--rounds", type=int, default=5)
    ap.add_argument("--threads", type=int, nargs="+", default=[1, 2])
    ap.add_argument("--card", default=os.path.join(ROOT, "models", "gear-unet-released", "card.json"))
    a = ap.parse_args()
    verdicts = []
    with tempfile.TemporaryDirectory() as tmp:
        pt3d, card3d = make_3d(tmp)
        env = dict(os.environ, PB_BENCH_CARD=a.card, PB_BENCH_CARD_3D=card3d)
        for label, kind, path, bench, goal in (("2D shipped model, OpenCV dnn", "2d", a.card, "BM_NeuralForward", 1.0),
                                               ("3D U-Net 64^3, LibTorch", "3d", pt3d, "BM_Neural3DForward", 0.95)):
            for t in a.threads:
                # Sides alternate, one process each per round; peerlib refuses the ratio when a
                # side's spread is wider than 25 % (issue 16).
                run = peerlib.alternate({"PyTorch": lambda: pytorch(kind, path, t) / 1e3,
                                         "ours": lambda: ours(a.binary, bench, t, env) / 1e3}, a.rounds)
                _, verdict = peerlib.ratio(run, "PyTorch", "ours", goal=goal,
                                           what=f"{label}, {t} thread(s): PyTorch / ours")
                verdicts.append(verdict)
                sys.stdout.flush()
    sys.exit(peerlib.exit_status(verdicts))


if __name__ == "__main__":
    main()
