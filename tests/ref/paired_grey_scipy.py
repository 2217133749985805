#!/usr/bin/python3
"""Reference for grey resampling of a paired reference (tests/test_paired_grey.cpp), with Debian's
/usr/bin/python3: the reference scan resampled onto the fast scan's grid by
scipy.ndimage.affine_transform (order 1, linear; constant 0 outside), each segmentation made
there, pores = air not 6-connected to the volume border (scipy.ndimage.label), and for several
raters STAPLE's E-step with fixed parameters (Warfield, Zou & Wells 2004: W = g a / (g a + (1-g) b),
a = prod p^D (1-p)^(1-D), b = prod q^(1-D) (1-q)^D; W >= 0.5).

Usage: paired_grey_scipy.py REF.raw NX NY NZ OX OY OZ SCALE OUT.raw SPEC [SPEC ...] [--fuse P,.. Q,.. G]
REF.raw: float32, x fastest. SCALE: fast voxel size / reference voxel size (the same origin, no
rotation), so out[i] = ref[SCALE * i] in index space. SPEC: manual:T (air = grey < T) or
sauvola:WINDOW:K:R (skimage.filters.threshold_sauvola). Writes the uint8 pore mask to OUT.raw and
prints JSON {"pore_voxels": n, "near_threshold": voxels within 1e-3 of a manual threshold}.
"""
import json
import sys

import numpy as np
from scipy import ndimage


def pores_of(air):
    six = ndimage.generate_binary_structure(3, 1)
    lab, _ = ndimage.label(air, structure=six)
    border = np.unique(np.concatenate([lab[0].ravel(), lab[-1].ravel(), lab[:, 0].ravel(), lab[:, -1].ravel(),
                                       lab[:, :, 0].ravel(), lab[:, :, -1].ravel()]))
    return air & ~np.isin(lab, border[border > 0])


def main():
    a = sys.argv[1:]
    fuse = None
    if "--fuse" in a:
        k = a.index("--fuse")
        fuse = ([float(x) for x in a[k + 1].split(",")], [float(x) for x in a[k + 2].split(",")], float(a[k + 3]))
        a = a[:k]
    src, nx, ny, nz, ox, oy, oz, scale, out = a[0], *map(int, a[1:7]), float(a[7]), a[8]
    specs = a[9:]
    ref = np.fromfile(src, dtype="<f4").reshape(nz, ny, nx).astype(np.float64)
    grey = ndimage.affine_transform(ref, np.diag([scale] * 3), offset=0.0, output_shape=(oz, oy, ox), order=1,
                                    mode="constant", cval=0.0)
    masks, near = [], 0
    for spec in specs:
        parts = spec.split(":")
        if parts[0] == "manual":
            t = float(parts[1])
            masks.append(pores_of(grey < t))
            near += int((np.abs(grey - t) < 1e-3).sum())
        elif parts[0] == "sauvola":
            from skimage import filters
            t = filters.threshold_sauvola(grey, window_size=int(parts[1]), k=float(parts[2]), r=float(parts[3]))
            masks.append(pores_of(grey < t))
        else:
            raise SystemExit(f"unknown spec {spec}")
    if fuse is None:
        res = masks[0]
    else:
        p, q, g = (np.clip(np.array(v, dtype=np.float64), 1e-12, 1 - 1e-12) for v in (fuse[0], fuse[1], [fuse[2]]))
        D = np.stack(masks).astype(bool)
        A = np.prod(np.where(D, p[:, None, None, None], 1 - p[:, None, None, None]), axis=0)
        B = np.prod(np.where(D, 1 - q[:, None, None, None], q[:, None, None, None]), axis=0)
        W = g[0] * A / (g[0] * A + (1 - g[0]) * B)
        res = W >= 0.5
    res.astype(np.uint8).tofile(out)
    print(json.dumps({"pore_voxels": int(res.sum()), "near_threshold": near}))


if __name__ == "__main__":
    main()
