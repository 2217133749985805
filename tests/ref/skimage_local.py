#!/usr/bin/python3
"""Reference local thresholds from scikit-image 0.19 (Debian python3-skimage), in 3D.

Usage: skimage_local.py RAW_FLOAT32 NX NY NZ OUT_RAW_U8 METHOD WINDOW K_OR_OFFSET [R]
Reads a little-endian float32 raw volume (x fastest), computes the local threshold T with
  niblack:    skimage.filters.threshold_niblack(vol, window_size=WINDOW, k=K)
  sauvola:    skimage.filters.threshold_sauvola(vol, window_size=WINDOW, k=K, r=R)
  local-mean: skimage.filters.threshold_local(vol, block_size=WINDOW, method='mean', offset=OFFSET)
writes the air mask (vol < T, pores are dark) as uint8 raw (x fastest) to OUT_RAW_U8 and prints
JSON {"air_voxels": n, "t_min": .., "t_max": ..}.
"""
import json
import sys

import numpy as np
from skimage import filters


def main():
    path, nx, ny, nz = sys.argv[1], *map(int, sys.argv[2:5])
    out_path, method, window, k = sys.argv[5], sys.argv[6], int(sys.argv[7]), float(sys.argv[8])
    vol = np.fromfile(path, dtype="<f4").reshape(nz, ny, nx)
    if method == "niblack":
        t = filters.threshold_niblack(vol, window_size=window, k=k)
    elif method == "sauvola":
        t = filters.threshold_sauvola(vol, window_size=window, k=k, r=float(sys.argv[9]))
    elif method == "local-mean":
        t = filters.threshold_local(vol, block_size=window, method="mean", offset=k)
    else:
        raise SystemExit(f"unknown method {method}")
    air = (vol < t).astype(np.uint8)
    air.tofile(out_path)
    print(json.dumps({"air_voxels": int(air.sum()), "t_min": float(t.min()), "t_max": float(t.max())}))


if __name__ == "__main__":
    main()
