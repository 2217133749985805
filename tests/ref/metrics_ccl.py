#!/usr/bin/python3
"""Reference connected-component labels from scipy.ndimage.label (Debian python3-scipy).

Usage: metrics_ccl.py MASK_RAW_UINT8 NX NY NZ CONNECTIVITY OUT_RAW_UINT32
Reads a uint8 raw mask (x fastest, non-zero = foreground), labels it with the 3D structuring
element of the given connectivity (6 -> generate_binary_structure(3, 1), 18 -> (3, 2),
26 -> (3, 3)), writes the labels as little-endian uint32 and prints {"count": N} as JSON.
"""
import json
import sys

import numpy as np
from scipy import ndimage


def main():
    path, nx, ny, nz, conn, out = sys.argv[1], *map(int, sys.argv[2:6]), sys.argv[6]
    rank = {6: 1, 18: 2, 26: 3}[conn]
    m = np.fromfile(path, dtype=np.uint8).reshape(nz, ny, nx) != 0
    labels, n = ndimage.label(m, structure=ndimage.generate_binary_structure(3, rank))
    labels.astype("<u4").tofile(out)
    print(json.dumps({"count": int(n)}))


if __name__ == "__main__":
    main()
