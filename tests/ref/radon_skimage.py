#!/usr/bin/python3
"""Reference Radon transform and FBP from scikit-image 0.19 (Debian python3-skimage).

Usage: radon_skimage.py IMAGE_F32 N ANGLES ARC_DEG FILTER OUTDIR
Reads an N x N little-endian float32 image (x fastest, row j at y = j - (N-1)/2 in porebench's
frame, N odd), takes skimage.transform.radon at theta_i = i * ARC_DEG / ANGLES degrees
(circle=True), reconstructs it with skimage.transform.iradon (FILTER: ramp, shepp-logan, cosine,
hamming, hann; linear interpolation), and writes OUTDIR/sino.f32 (ANGLES rows of N bins) and
OUTDIR/recon.f32 (N x N, x fastest). Prints {"bins": N, "angles": ANGLES} as JSON.

Convention: skimage's projection coordinate is t = x cos(theta) - row sin(theta) (rows run down),
porebench's is t = x cos(theta) + y sin(theta); flipping the rows in and out makes them agree.
"""
import json
import os
import sys

import numpy as np
from skimage.transform import iradon, radon


def main():
    path, n, angles, arc, filt, out = sys.argv[1], int(sys.argv[2]), int(sys.argv[3]), float(sys.argv[4]), sys.argv[5], sys.argv[6]
    img = np.fromfile(path, dtype="<f4").reshape(n, n).astype(np.float64)
    theta = np.arange(angles) * arc / angles
    sino = radon(np.flipud(img), theta=theta, circle=True)  # (bins, angles)
    rec = np.flipud(iradon(sino, theta=theta, filter_name=filt, interpolation="linear", circle=True))
    sino.T.astype("<f4").tofile(os.path.join(out, "sino.f32"))
    rec.astype("<f4").tofile(os.path.join(out, "recon.f32"))
    print(json.dumps({"bins": int(sino.shape[0]), "angles": int(sino.shape[1])}))


if __name__ == "__main__":
    main()
