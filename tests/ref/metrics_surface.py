#!/usr/bin/python3
"""Reference surface distances from scipy.ndimage (Debian python3-scipy).

Usage: metrics_surface.py PRED_RAW_UINT8 REF_RAW_UINT8 NX NY NZ SX SY SZ
Surface voxels: foreground voxels removed by scipy.ndimage.binary_erosion with the 6-connected
structuring element and border_value=0 (so voxels on the volume border are surface). Distances
from each surface voxel of one side to the other side's surface come from
scipy.ndimage.distance_transform_edt(~surface, sampling=spacing) (exact Euclidean, mm).
Prints JSON: hd95 = max of the two directed 95th percentiles (numpy linear interpolation),
assd = mean of the concatenated directed distances.
"""
import json
import sys

import numpy as np
from scipy import ndimage


def surface(m):
    er = ndimage.binary_erosion(m, structure=ndimage.generate_binary_structure(3, 1), border_value=0)
    return m & ~er


def main():
    nx, ny, nz = map(int, sys.argv[3:6])
    sx, sy, sz = map(float, sys.argv[6:9])
    shape = (nz, ny, nx)
    p = np.fromfile(sys.argv[1], dtype=np.uint8).reshape(shape) != 0
    r = np.fromfile(sys.argv[2], dtype=np.uint8).reshape(shape) != 0
    sp, sr = surface(p), surface(r)
    sampling = (sz, sy, sx)
    d_pr = ndimage.distance_transform_edt(~sr, sampling=sampling)[sp]
    d_rp = ndimage.distance_transform_edt(~sp, sampling=sampling)[sr]
    print(json.dumps({
        "hd95": float(max(np.percentile(d_pr, 95), np.percentile(d_rp, 95))),
        "assd": float(np.concatenate([d_pr, d_rp]).mean()),
        "n_pred": int(sp.sum()), "n_ref": int(sr.sum()),
    }))


if __name__ == "__main__":
    main()
