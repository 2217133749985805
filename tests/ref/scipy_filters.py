#!/usr/bin/python3
"""Reference pre-filters from scipy.ndimage (Debian python3-scipy).

Usage: scipy_filters.py IN_RAW_F32 NX NY NZ OUT_RAW_F32 median RADIUS
       scipy_filters.py IN_RAW_F32 NX NY NZ OUT_RAW_F32 gaussian SX SY SZ   (sigma in voxels)
Both use mode='reflect' (scipy's default); gaussian uses truncate=4.0 (scipy's default).
"""
import sys

import numpy as np
from scipy import ndimage


def main():
    src, nx, ny, nz, dst, kind = sys.argv[1], *map(int, sys.argv[2:5]), sys.argv[5], sys.argv[6]
    vol = np.fromfile(src, dtype="<f4").reshape(nz, ny, nx)
    if kind == "median":
        r = int(sys.argv[7])
        out = ndimage.median_filter(vol, size=2 * r + 1, mode="reflect")
    elif kind == "gaussian":
        sx, sy, sz = map(float, sys.argv[7:10])
        out = ndimage.gaussian_filter(vol.astype(np.float64), sigma=(sz, sy, sx), mode="reflect", truncate=4.0)
    else:
        raise SystemExit(f"unknown filter {kind}")
    out.astype("<f4").tofile(dst)


if __name__ == "__main__":
    main()
