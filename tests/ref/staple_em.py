#!/usr/bin/python3
"""STAPLE for binary masks, straight from Warfield, Zou & Wells (2004), IEEE TMI 23(7):903-921,
eqs. (14)-(16) (E-step W, M-step p and q) with the prior f(T=1) fixed at the mean foreground
fraction of the raters, stopping when no p or q changes by more than 1e-7, as ITK's
STAPLEImageFilter does. numpy only; an independent check of the C++ path through ITK.
Usage: staple_em.py DIMS_X DIMS_Y DIMS_Z MASK.raw... -> JSON {p, q, iterations, consensus_voxels}"""
import json, sys
import numpy as np

nx, ny, nz = map(int, sys.argv[1:4])
D = np.stack([np.fromfile(f, dtype=np.uint8).reshape(nz, ny, nx).ravel().astype(np.float64)
              for f in sys.argv[4:]])
R = D.shape[0]
W = D.mean(axis=0)
g = W.mean()
last = None
it = 0
for it in range(200):
    p = (D * W).sum(axis=1) / W.sum()
    q = ((1 - D) * (1 - W)).sum(axis=1) / (1 - W).sum()
    a = np.prod(np.where(D == 1, p[:, None], 1 - p[:, None]), axis=0)
    b = np.prod(np.where(D == 1, 1 - q[:, None], q[:, None]), axis=0)
    W = g * a / (g * a + (1 - g) * b)
    if last is not None and np.all((p - last[0]) ** 2 <= 1e-14) and np.all((q - last[1]) ** 2 <= 1e-14):
        break
    last = (p, q)
print(json.dumps({"p": p.tolist(), "q": q.tolist(), "iterations": it, "prior": g,
                  "consensus_voxels": int((W >= 0.5).sum()),
                  "near_half": int((np.abs(W - 0.5) < 1e-4).sum())}))
