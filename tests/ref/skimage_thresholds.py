#!/usr/bin/python3
"""Reference thresholds from scikit-image 0.19 (Debian python3-skimage).

Usage: skimage_thresholds.py RAW_FLOAT32 NX NY NZ NBINS METHOD [METHOD ...]
Reads a little-endian float32 raw volume (x fastest) and prints one JSON object
{method: threshold} computed by skimage.filters.threshold_<method> on all voxels.
Methods: otsu, li, yen, triangle, isodata, mean, minimum.
"""
import json
import sys

import numpy as np
from skimage import filters


def main():
    path, nx, ny, nz, nbins = sys.argv[1], *map(int, sys.argv[2:6])
    vol = np.fromfile(path, dtype="<f4").reshape(nz, ny, nx)
    out = {}
    for m in sys.argv[6:]:
        if m == "otsu":
            t = filters.threshold_otsu(vol, nbins=nbins)
        elif m == "li":
            t = filters.threshold_li(vol)
        elif m == "yen":
            t = filters.threshold_yen(vol, nbins=nbins)
        elif m == "triangle":
            t = filters.threshold_triangle(vol, nbins=nbins)
        elif m == "isodata":
            t = filters.threshold_isodata(vol, nbins=nbins)
        elif m == "mean":
            t = filters.threshold_mean(vol)
        elif m == "minimum":
            t = filters.threshold_minimum(vol, nbins=nbins)
        else:
            raise SystemExit(f"unknown method {m}")
        out[m] = float(t)
    print(json.dumps(out))


if __name__ == "__main__":
    main()
