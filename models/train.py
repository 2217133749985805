#!/usr/bin/python3
"""Trains a small 2D / 2.5D U-Net on patches written by `porebench export-patches`, exports ONNX and
writes the model card. CPU only, minutes not hours.

  /usr/bin/python3 models/train.py --data PATCHES --out models/NAME --name NAME --version 1.0.0 \
      [--slices 1|3|5] [--epochs 8] [--steps 60] [--batch 16] [--base 8] [--levels 3] [--seed 13] \
      [--separable]

U-Net: Ronneberger O., Fischer P., Brox T. (2015) U-Net: convolutional networks for biomedical
image segmentation. MICCAI, LNCS 9351:234-241. Binary cross-entropy and Adam (Kingma D.P., Ba J.
(2015) Adam: a method for stochastic optimization. ICLR): common practice, no source. Patches
holding pores are drawn with probability --pore-fraction (pores are sparse; common practice).
The input window [low, high] is the 0.5 / 99.5 percentile of the training patches' grey values and
goes into the card (normalise mode "window"), so inference sees what training saw.
Writes OUT/model.onnx, OUT/weights.pt (the same weights for PyTorch), OUT/card.json, OUT/train-log.txt (arguments, data hash, loss per epoch).
"""
import argparse
import csv
import hashlib
import json
import os
import sys
import time

import numpy as np
import torch
import torch.nn as nn

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from unet import UNet, export_onnx  # noqa: E402


def load(data_dir, slices):
    index = os.path.join(data_dir, "index.csv")
    with open(index, newline="") as f:
        rows = list(csv.DictReader(f))
    if not rows:
        sys.exit(f"train.py: {index} lists no patches")
    scans, masks, files = [], [], {}
    for r in rows:
        for key in ("scan_file", "mask_file"):
            if r[key] not in files:
                files[r[key]] = np.load(os.path.join(data_dir, r[key]), mmap_mode="r")
        s = files[r["scan_file"]][int(r["row"])]
        if s.shape[0] < slices:
            sys.exit(f"train.py: {r['scan_file']} holds {s.shape[0]} slices per patch, --slices {slices} asks more")
        c = s.shape[0] // 2
        scans.append(np.asarray(s[c - slices // 2: c + slices // 2 + 1], dtype=np.float32))
        masks.append(np.asarray(files[r["mask_file"]][int(r["row"])], dtype=np.float32))
    h = hashlib.sha256()
    with open(index, "rb") as f:
        h.update(f.read())
    for name in sorted(files):
        with open(os.path.join(data_dir, name), "rb") as f:
            h.update(f.read())
    return np.stack(scans), np.stack(masks)[:, None], h.hexdigest(), rows


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--data", required=True)
    ap.add_argument("--out", required=True)
    ap.add_argument("--name", required=True)
    ap.add_argument("--version", default="1.0.0")
    ap.add_argument("--slices", type=int, default=1)
    ap.add_argument("--epochs", type=int, default=8)
    ap.add_argument("--steps", type=int, default=60, help="optimiser steps per epoch")
    ap.add_argument("--batch", type=int, default=16)
    ap.add_argument("--base", type=int, default=8)
    ap.add_argument("--levels", type=int, default=3)
    ap.add_argument("--separable", action="store_true",
                    help="depthwise-separable 3x3 convolutions (models/unet.py; OpenCV dnn runs them faster)")
    ap.add_argument("--lr", type=float, default=2e-3)
    ap.add_argument("--pore-fraction", type=float, default=0.7)
    ap.add_argument("--tile", type=int, default=128, help="inference tile written to the card")
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--seed", type=int, default=13)
    ap.add_argument("--scan-conditions", default="")
    ap.add_argument("--intended-use", default="demonstration on synthetic scans; not for qualification")
    a = ap.parse_args()
    if a.slices < 1 or a.slices % 2 == 0:
        sys.exit(f"train.py: --slices {a.slices} must be odd and >= 1")
    torch.manual_seed(a.seed)
    np.random.seed(a.seed)
    torch.set_num_threads(a.threads)
    x, y, data_sha, rows = load(a.data, a.slices)
    low, high = (float(v) for v in np.percentile(x, [0.5, 99.5]))
    x = (x - low) / (high - low)
    has_pore = y.reshape(len(y), -1).max(axis=1) > 0
    pore_idx, other_idx = np.flatnonzero(has_pore), np.flatnonzero(~has_pore)
    model = UNet(dims=2, in_channels=a.slices, base=a.base, levels=a.levels, sigmoid=False, separable=a.separable)
    opt = torch.optim.Adam(model.parameters(), lr=a.lr)
    loss_fn = nn.BCEWithLogitsLoss()
    rng = np.random.default_rng(a.seed)
    os.makedirs(a.out, exist_ok=True)
    log = [f"train.py {' '.join(sys.argv[1:])}", f"torch {torch.__version__}, numpy {np.__version__}",
           f"patches {len(x)} ({len(pore_idx)} with pores), shape {list(x.shape[1:])}, data sha256 {data_sha}",
           f"window low {low:.6g} high {high:.6g} (0.5 / 99.5 percentile of the training patches)"]
    print("\n".join(log), flush=True)
    t0 = time.time()
    for epoch in range(a.epochs):
        model.train()
        total = 0.0
        for _ in range(a.steps):
            pick = []
            for _ in range(a.batch):
                use_pore = len(pore_idx) and (not len(other_idx) or rng.random() < a.pore_fraction)
                pick.append(rng.choice(pore_idx) if use_pore else rng.choice(other_idx))
            xb = torch.from_numpy(x[pick])
            yb = torch.from_numpy(y[pick])
            if rng.random() < 0.5:  # flips: the scans have no preferred orientation (common practice)
                xb, yb = xb.flip(-1), yb.flip(-1)
            if rng.random() < 0.5:
                xb, yb = xb.flip(-2), yb.flip(-2)
            opt.zero_grad()
            loss = loss_fn(model(xb), yb)
            loss.backward()
            opt.step()
            total += loss.item()
        line = f"epoch {epoch + 1} loss {total / a.steps:.5f} elapsed {time.time() - t0:.1f} s"
        log.append(line)
        print(line, flush=True)
    model.eval()
    model.sigmoid = True
    export_onnx(model, torch.zeros(1, a.slices, a.tile, a.tile), os.path.join(a.out, "model.onnx"))
    torch.save(model.state_dict(), os.path.join(a.out, "weights.pt"))  # for PyTorch-side benchmarks
    datasets = sorted({r["dataset"] for r in rows})
    scans = sorted({r["scan"] for r in rows})
    card = {"name": a.name, "version": a.version, "format": "onnx", "file": "model.onnx",
            "input": {"kind": "slice" if a.slices == 1 else "stack", "slices": a.slices, "tile": [a.tile, a.tile],
                      "overlap": 0.25, "normalise": {"mode": "window", "low": low, "high": high}},
            "output": {"kind": "probability", "channel": 0, "pore_threshold": 0.5},
            "training": {"data": f"porebench export-patches: calibration slices of {', '.join(datasets)}; scans "
                                 f"{', '.join(scans)}; {len(x)} patches", "sha256": data_sha,
                         "scan_conditions": a.scan_conditions, "seed": a.seed, "epochs": a.epochs,
                         "steps_per_epoch": a.steps, "batch": a.batch, "learning_rate": a.lr,
                         "architecture": f"2D U-Net, {a.levels} levels, base {a.base}, "
                                         f"{'depthwise-separable 3x3 convolutions, ' if a.separable else ''}"
                                         f"transposed-convolution decoder, {a.slices} input slice(s)",
                         "unet": {"in_channels": a.slices, "base": a.base, "levels": a.levels,
                                  "separable": a.separable},
                         "loss": "binary cross-entropy", "optimiser": "Adam"},
            "intended_use": a.intended_use, "licence": "same as porebench"}
    with open(os.path.join(a.out, "card.json"), "w") as f:
        json.dump(card, f, indent=1)
        f.write("\n")
    with open(os.path.join(a.out, "train-log.txt"), "w") as f:
        f.write("\n".join(log) + "\n")
    print(f"wrote {a.out}/model.onnx, card.json, train-log.txt")


if __name__ == "__main__":
    main()
