"""The scoring pair of bench/peers/score_python_vs_cli.sh and bench/score_rss.py (numpy).

make_pair(n, rng): a cylinder part with ~3000 spherical pores per 512^3 (radius 1.5-7 voxels);
the prediction moves each pore by up to one voxel, misses one in ten and adds 3000 single-voxel
false calls. Returns (part, ref, pred): part bool, ref and pred uint8 0/1, both inside the part.
"""
import numpy as np


def make_pair(n, rng):
    z, y, x = np.ogrid[:n, :n, :n]
    part = ((y - n / 2) ** 2 + (x - n / 2) ** 2 < (0.45 * n) ** 2) & (z > 4) & (z < n - 5)
    ref = np.zeros((n, n, n), np.uint8)
    pred = np.zeros((n, n, n), np.uint8)
    for _ in range(3000 * n ** 3 // 512 ** 3):
        r = rng.uniform(1.5, 7)
        c = rng.uniform(0.1 * n, 0.9 * n, 3)
        lo = np.maximum(np.floor(c - r - 2).astype(int), 0)
        hi = np.minimum(np.ceil(c + r + 2).astype(int), n)
        zz, yy, xx = np.ogrid[lo[0]:hi[0], lo[1]:hi[1], lo[2]:hi[2]]
        ball = lambda d: (zz - c[0] - d[0]) ** 2 + (yy - c[1] - d[1]) ** 2 + (xx - c[2] - d[2]) ** 2 <= r * r
        ref[lo[0]:hi[0], lo[1]:hi[1], lo[2]:hi[2]] |= ball((0, 0, 0))
        if rng.random() > 0.1:
            pred[lo[0]:hi[0], lo[1]:hi[1], lo[2]:hi[2]] |= ball(rng.integers(-1, 2, 3))
    pred[tuple(rng.integers(0, n, (3, 3000)))] = 1
    ref &= part
    pred &= part
    return part, ref, pred
