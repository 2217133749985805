#!/usr/bin/python3
"""Reference local thresholds from scikit-image 0.19 (Debian python3-skimage), in 3D.

Usage: skimage_local.py RAW_FLOAT32 NX NY NZ OUT_PREFIX SPEC [SPEC ...]
Reads a little-endian float32 raw volume (x fastest). For the i-th SPEC (0-based), one of
  niblack:WINDOW:K       skimage.filters.threshold_niblack(vol, window_size=WINDOW, k=K)
  sauvola:WINDOW:K:R     skimage.filters.threshold_sauvola(vol, window_size=WINDOW, k=K, r=R)
  local-mean:WINDOW:OFF  skimage.filters.threshold_local(vol, block_size=WINDOW, method='mean', offset=OFF)
computes the local threshold T, writes the air mask (vol < T, pores are dark) as uint8 raw
(x fastest) to OUT_PREFIX<i>.raw, and prints one JSON list of {"air_voxels": n} per SPEC.
"""
import json
import sys

import numpy as np
from skimage import filters


def threshold(vol, spec):
    parts = spec.split(":")
    method, window, k = parts[0], int(parts[1]), float(parts[2])
    if method == "niblack":
        return filters.threshold_niblack(vol, window_size=window, k=k)
    if method == "sauvola":
        return filters.threshold_sauvola(vol, window_size=window, k=k, r=float(parts[3]))
    if method == "local-mean":
        return filters.threshold_local(vol, block_size=window, method="mean", offset=k)
    raise SystemExit(f"unknown method {method}")


def main():
    path, nx, ny, nz = sys.argv[1], *map(int, sys.argv[2:5])
    prefix = sys.argv[5]
    vol = np.fromfile(path, dtype="<f4").reshape(nz, ny, nx)
    out = []
    for i, spec in enumerate(sys.argv[6:]):
        air = (vol < threshold(vol, spec)).astype(np.uint8)
        air.tofile(f"{prefix}{i}.raw")
        out.append({"air_voxels": int(air.sum())})
    print(json.dumps(out))


if __name__ == "__main__":
    main()
