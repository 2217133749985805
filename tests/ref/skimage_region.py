#!/usr/bin/python3
"""Reference region growing from scikit-image 0.19 (Debian python3-skimage).

Usage:
  skimage_region.py hysteresis IN_F32 NX NY NZ LOW HIGH OUT_U8
      air = skimage.filters.apply_hysteresis_threshold(-v, -HIGH, -LOW): pores are dark, so the
      volume is negated; skimage labels with scipy.ndimage's default (face, 6-) connectivity.
  skimage_region.py watershed RELIEF_F32 MARKERS_U8 NX NY NZ OUT_U8
      labels = skimage.segmentation.watershed(relief, markers, connectivity=1)
"""
import sys

import numpy as np
from skimage import filters, segmentation


def load(path, dtype, nx, ny, nz):
    return np.fromfile(path, dtype=dtype).reshape(nz, ny, nx)


def main():
    kind = sys.argv[1]
    if kind == "hysteresis":
        src, nx, ny, nz, low, high, dst = sys.argv[2], *map(int, sys.argv[3:6]), *map(float, sys.argv[6:8]), sys.argv[8]
        v = load(src, "<f4", nx, ny, nz)
        out = filters.apply_hysteresis_threshold(-v, -high, -low)
    elif kind == "watershed":
        relief, markers, nx, ny, nz, dst = sys.argv[2], sys.argv[3], *map(int, sys.argv[4:7]), sys.argv[7]
        out = segmentation.watershed(load(relief, "<f4", nx, ny, nz), load(markers, "u1", nx, ny, nz).astype(np.int32),
                                     connectivity=1)
    else:
        raise SystemExit(f"unknown kind {kind}")
    out.astype("u1").tofile(dst)


if __name__ == "__main__":
    main()
