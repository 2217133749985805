#!/usr/bin/python3
"""Writes a pair of uint16 MetaImage scans of one invented part (a glass-filled polyamide gear blank
cut to a block) with sparse spherical pores: test.mha (a fast scan: more noise) and ref.mha (the
reference scan: less noise), both NX x NY x NZ, slab by slab through numpy.memmap, so that no array
of the whole volume is ever held (peak memory: one slab of float32 noise).

usage: make_large_pair.py DIR NX NY NZ [PORES]
Grey values (invented): air 6000, material 30000, pores 9000; noise sigma 2500 (test) and 1200 (ref).
"""
import os
import sys

import numpy as np

SLAB = 16  # slices per slab


def header(nx, ny, nz):
    return ("ObjectType = Image\nNDims = 3\nBinaryData = True\nBinaryDataByteOrderMSB = False\n"
            "CompressedData = False\nOffset = 0 0 0\nElementSpacing = 0.02 0.02 0.02\n"
            f"DimSize = {nx} {ny} {nz}\nElementType = MET_USHORT\nElementDataFile = LOCAL\n").encode()


def pores(nx, ny, nz, count, rng):
    """Centres and radii (voxels) of `count` pores inside the part, sorted by z."""
    m = 8
    c = np.stack([rng.uniform(m + 8, n - m - 8, count) for n in (nx, ny, nz)], axis=1)
    r = rng.uniform(1.5, 7.0, count)
    order = np.argsort(c[:, 2])
    return c[order], r[order]


def write(path, nx, ny, nz, centres, radii, sigma, seed):
    h = header(nx, ny, nz)
    with open(path + ".partial", "wb") as f:
        f.write(h)
        f.truncate(len(h) + nx * ny * nz * 2)
    vol = np.memmap(path + ".partial", dtype="<u2", mode="r+", offset=len(h), shape=(nz, ny, nx))
    m = 8  # air margin around the part
    ys, xs = np.mgrid[0:ny, 0:nx]
    part_xy = (xs >= m) & (xs < nx - m) & (ys >= m) & (ys < ny - m)
    for z0 in range(0, nz, SLAB):
        z1 = min(nz, z0 + SLAB)
        rng = np.random.default_rng(seed * 100003 + z0)
        slab = np.empty((z1 - z0, ny, nx), dtype=np.float32)
        for k, z in enumerate(range(z0, z1)):
            inside = part_xy if m <= z < nz - m else np.zeros_like(part_xy)
            slab[k] = np.where(inside, 30000.0, 6000.0)
        near = np.nonzero((centres[:, 2] + radii >= z0) & (centres[:, 2] - radii < z1))[0]
        for i in near:
            (cx, cy, cz), r = centres[i], radii[i]
            x0, x1 = int(max(0, cx - r)), int(min(nx, cx + r + 1))
            y0, y1 = int(max(0, cy - r)), int(min(ny, cy + r + 1))
            for z in range(max(z0, int(cz - r)), min(z1, int(cz + r) + 1)):
                sub = slab[z - z0, y0:y1, x0:x1]
                d2 = (xs[y0:y1, x0:x1] - cx) ** 2 + (ys[y0:y1, x0:x1] - cy) ** 2 + (z - cz) ** 2
                sub[d2 <= r * r] = 9000.0
        slab += rng.standard_normal(slab.shape, dtype=np.float32) * np.float32(sigma)
        np.clip(slab, 0, 65535, out=slab)
        vol[z0:z1] = slab.astype(np.uint16)
        vol.flush()
    del vol
    os.replace(path + ".partial", path)


def main():
    if len(sys.argv) not in (5, 6):
        sys.exit(__doc__)
    d = sys.argv[1]
    nx, ny, nz = (int(a) for a in sys.argv[2:5])
    count = int(sys.argv[5]) if len(sys.argv) == 6 else max(50, nx * ny * nz // 200_000)
    rng = np.random.default_rng(20261202)
    centres, radii = pores(nx, ny, nz, count, rng)
    os.makedirs(d, exist_ok=True)
    write(os.path.join(d, "test.mha"), nx, ny, nz, centres, radii, 2500.0, 1)
    write(os.path.join(d, "ref.mha"), nx, ny, nz, centres, radii, 1200.0, 2)
    print(f"wrote {d}/test.mha and {d}/ref.mha: {nx} x {ny} x {nz} uint16, {count} pores")


if __name__ == "__main__":
    main()
