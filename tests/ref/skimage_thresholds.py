#!/usr/bin/python3
"""Reference thresholds from scikit-image 0.19 (Debian python3-skimage) and numpy.

Usage: skimage_thresholds.py RAW_FLOAT32 NX NY NZ NBINS METHOD [METHOD ...]
Reads a little-endian float32 raw volume (x fastest) and prints one JSON object
{method: value} computed on all voxels:
  otsu, li, yen, triangle, isodata, mean, minimum
      skimage.filters.threshold_<method> (nbins=NBINS where it takes nbins). scikit-image
      returns the centre of the last bin of the dark class (foreground is > threshold);
      li and mean return a grey value. minimum prints null where scikit-image raises (no two
      maxima after smoothing).
  METHOD@B
      any of the above with nbins=B instead of NBINS.
  int:METHOD
      the same on the volume cast to int64 (its values must be whole numbers): scikit-image then
      histograms one bin per grey level (np.bincount) whatever NBINS, and returns a grey level.
  percentile:P
      numpy.percentile(volume, P) (linear interpolation).
  li_criterion:T1,T2,...
      a list: Li's cross-entropy criterion at each threshold T (split: bin centre > T is
      foreground), from skimage.filters.thresholding._cross_entropy on the volume shifted to a
      zero minimum (as threshold_li does), with NBINS bins over that range.
"""
import json
import sys

import numpy as np
from skimage import filters
from skimage.filters import thresholding


def main():
    path, nx, ny, nz, nbins = sys.argv[1], *map(int, sys.argv[2:6])
    vol = np.fromfile(path, dtype="<f4").reshape(nz, ny, nx)
    out = {}
    ivol = None
    default_bins = nbins
    for arg in sys.argv[6:]:
        m, img, nbins = arg, vol, default_bins
        if "@" in m:
            m, nbins = m.split("@")[0], int(m.split("@")[1])
        if m.startswith("int:"):
            if ivol is None:
                ivol = np.rint(vol).astype(np.int64)
                if not np.array_equal(ivol, vol):
                    raise SystemExit("int: the volume holds values that are not whole numbers")
            m, img = m[4:], ivol
        if m == "otsu":
            t = filters.threshold_otsu(img, nbins=nbins)
        elif m == "li":
            t = filters.threshold_li(img)
        elif m == "yen":
            t = filters.threshold_yen(img, nbins=nbins)
        elif m == "triangle":
            t = filters.threshold_triangle(img, nbins=nbins)
        elif m == "isodata":
            t = filters.threshold_isodata(img, nbins=nbins)
        elif m == "mean":
            t = filters.threshold_mean(img)
        elif m == "minimum":
            try:
                t = filters.threshold_minimum(img, nbins=nbins)
            except RuntimeError:  # "Unable to find two maxima in histogram": printed as null
                out[arg] = None
                continue
        elif m.startswith("percentile:"):
            t = np.percentile(vol, float(m.split(":", 1)[1]))
        elif m.startswith("li_criterion:"):
            lo = float(vol.min())
            shifted = vol.astype(np.float64) - lo
            ts = [float(x) - lo for x in m.split(":", 1)[1].split(",")]
            out["li_criterion"] = [float(thresholding._cross_entropy(shifted, t, bins=nbins)) for t in ts]
            continue
        else:
            raise SystemExit(f"unknown method {m}")
        out[arg] = float(t)
    print(json.dumps(out))


if __name__ == "__main__":
    main()
