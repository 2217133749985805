"""Tiny random-weight models for the neural-family tests, with PyTorch's own outputs on fixed inputs.

Usage: /usr/bin/python3 neural_models.py OUTDIR
Writes OUTDIR/NAME/{card.json, model.onnx|model.pt, input.npy, expected.npy} for
  tiny2d    2D U-Net (slice), ONNX, sigmoid in the graph          -> OpenCV dnn
  tiny25d   2.5D U-Net (stack of 3 slices as channels), ONNX      -> OpenCV dnn
  sep2d     2D U-Net, depthwise-separable 3x3 convolutions, ONNX  -> OpenCV dnn (the shipped models' kind)
  sep25d    the same as a 2.5D stack of 3 slices, ONNX            -> OpenCV dnn
  tiny3d    3D U-Net (patch), TorchScript, logits                  -> LibTorch
  conv3d    3D plain convolution net (patch), ONNX                 -> OpenCV dnn
  deconv3d  3D U-Net as ONNX: OpenCV 4.6 refuses ConvTranspose3d   -> the 'unsupported layer' error
  nan2d     2D net whose weights hold a NaN                        -> the 'NaN output' error
expected.npy is PyTorch's output for input.npy (the independent reference for our engines).
"""
import json
import os
import sys

import numpy as np
import torch
import torch.nn as nn

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..", "models"))
from unet import UNet, randomise_batchnorm, export_onnx, export_torchscript  # noqa: E402


def card(name, fmt, file, kind, tile, slices=1, out_kind="probability"):
    return {"name": name, "version": "0.0.1", "format": fmt, "file": file,
            "input": {"kind": kind, "slices": slices, "tile": tile, "overlap": 0.25,
                      "normalise": {"mode": "window", "low": 0.0, "high": 1.0}},
            "output": {"kind": out_kind, "channel": 0, "pore_threshold": 0.5},
            "training": {"data": "none: random weights for tests", "sha256": "", "scan_conditions": "none"},
            "intended_use": "tests only", "licence": "same as porebench"}


def emit(out, name, model, example, fmt, c, gen):
    d = os.path.join(out, name)
    os.makedirs(d, exist_ok=True)
    model.eval()
    path = os.path.join(d, c["file"])
    (export_onnx if fmt == "onnx" else export_torchscript)(model, example, path)
    x = torch.randn(example.shape, generator=gen)
    with torch.no_grad():
        y = model(x)
    np.save(os.path.join(d, "input.npy"), x.numpy().astype(np.float32))
    np.save(os.path.join(d, "expected.npy"), y.numpy().astype(np.float32))
    with open(os.path.join(d, "card.json"), "w") as f:
        json.dump(c, f, indent=1)


def main(out):
    torch.manual_seed(13)
    torch.set_num_threads(1)
    gen = torch.Generator().manual_seed(13)

    m = UNet(dims=2, in_channels=1, base=4, levels=2, sigmoid=True)
    randomise_batchnorm(m, gen)
    emit(out, "tiny2d", m, torch.zeros(2, 1, 32, 32), "onnx", card("tiny2d", "onnx", "model.onnx", "slice", [32, 32]), gen)

    m = UNet(dims=2, in_channels=3, base=4, levels=2, sigmoid=True)
    randomise_batchnorm(m, gen)
    emit(out, "tiny25d", m, torch.zeros(2, 3, 32, 32), "onnx",
         card("tiny25d", "onnx", "model.onnx", "stack", [32, 32], slices=3), gen)

    m = UNet(dims=2, in_channels=1, base=4, levels=2, sigmoid=True, separable=True)
    randomise_batchnorm(m, gen)
    emit(out, "sep2d", m, torch.zeros(2, 1, 32, 32), "onnx", card("sep2d", "onnx", "model.onnx", "slice", [32, 32]), gen)

    m = UNet(dims=2, in_channels=3, base=4, levels=2, sigmoid=True, separable=True)
    randomise_batchnorm(m, gen)
    emit(out, "sep25d", m, torch.zeros(2, 3, 32, 32), "onnx",
         card("sep25d", "onnx", "model.onnx", "stack", [32, 32], slices=3), gen)

    m = UNet(dims=3, in_channels=1, base=4, levels=2, sigmoid=False)
    randomise_batchnorm(m, gen)
    emit(out, "tiny3d", m, torch.zeros(2, 1, 16, 16, 16), "torchscript",
         card("tiny3d", "torchscript", "model.pt", "patch", [16, 16, 16], out_kind="logit"), gen)

    m = nn.Sequential(nn.Conv3d(1, 4, 3, padding=1), nn.ReLU(), nn.Conv3d(4, 1, 1), nn.Sigmoid())
    emit(out, "conv3d", m, torch.zeros(2, 1, 16, 16, 16), "onnx",
         card("conv3d", "onnx", "model.onnx", "patch", [16, 16, 16]), gen)

    m = UNet(dims=3, in_channels=1, base=4, levels=2, sigmoid=True)
    emit(out, "deconv3d", m, torch.zeros(1, 1, 16, 16, 16), "onnx",
         card("deconv3d", "onnx", "model.onnx", "patch", [16, 16, 16]), gen)

    m = nn.Sequential(nn.Conv2d(1, 1, 3, padding=1), nn.Sigmoid())
    with torch.no_grad():
        m[0].weight[0, 0, 1, 1] = float("nan")
    emit(out, "nan2d", m, torch.zeros(1, 1, 32, 32), "onnx", card("nan2d", "onnx", "model.onnx", "slice", [32, 32]), gen)


if __name__ == "__main__":
    main(sys.argv[1])
