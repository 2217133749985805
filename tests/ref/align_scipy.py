"""Independent references for tests/test_align*.cpp (run with Debian's /usr/bin/python3).

  rotation PAIRS.csv        rows "sx,sy,sz,dx,dy,dz": least-squares rotation taking the centred
                            source points onto the centred targets by
                            scipy.spatial.transform.Rotation.align_vectors (Kabsch/Wahba);
                            prints the 3x3 matrix row by row.
  resample IN.raw NX NY NZ OX OY OZ ORDER M00 M01 M02 M10 M11 M12 M20 M21 M22 B0 B1 B2 OUT.raw
                            float32 volume (x fastest) of NX x NY x NZ resampled onto OX x OY x OZ by scipy.ndimage.affine_transform
                            in index space: out[i] = in[M i + B] (i = (x, y, z)), ORDER 0 (nearest)
                            or 1 (linear), constant 0 outside.
  shift A.raw B.raw NX NY NZ  skimage.registration.phase_cross_correlation(A, B, upsample 10):
                            prints the shift of B's content relative to A as x y z voxels.
  reduce IN.raw NX NY NZ OUT.raw
                            one Gaussian-pyramid REDUCE step (Burt & Adelson 1983, a = 3/8):
                            scipy.ndimage.correlate1d with [1 4 6 4 1]/16, mode "nearest", along
                            each axis, then every second voxel from the first (float64 inside).
"""
import sys

import numpy as np


def rotation(path):
    from scipy.spatial.transform import Rotation
    d = np.loadtxt(path, delimiter=",", ndmin=2)
    s, t = d[:, :3], d[:, 3:]
    s = s - s.mean(axis=0)
    t = t - t.mean(axis=0)
    r, _ = Rotation.align_vectors(t, s)  # r.apply(s) ~ t
    for row in r.as_matrix():
        print(" ".join(repr(float(v)) for v in row))


def resample(args):
    from scipy import ndimage
    src, nx, ny, nz = args[0], int(args[1]), int(args[2]), int(args[3])
    ox, oy, oz, order = int(args[4]), int(args[5]), int(args[6]), int(args[7])
    m = np.array([float(v) for v in args[8:17]]).reshape(3, 3)
    b = np.array([float(v) for v in args[17:20]])
    out = args[20]
    vol = np.fromfile(src, dtype="<f4").reshape(nz, ny, nx)
    # numpy axes are (z, y, x): reverse the order of rows and columns of the xyz matrix.
    p = [2, 1, 0]
    mz = m[np.ix_(p, p)]
    bz = b[p]
    res = ndimage.affine_transform(vol, mz, offset=bz, output_shape=(oz, oy, ox), order=order,
                                   mode="constant", cval=0.0)
    res.astype("<f4").tofile(out)


def shift(args):
    from skimage.registration import phase_cross_correlation
    a, b, nx, ny, nz = args[0], args[1], int(args[2]), int(args[3]), int(args[4])
    va = np.fromfile(a, dtype="<f4").reshape(nz, ny, nx)
    vb = np.fromfile(b, dtype="<f4").reshape(nz, ny, nx)
    # skimage returns the shift that registers the moving image (b) onto a: its negative is b's offset.
    s, _, _ = phase_cross_correlation(va, vb, upsample_factor=10)
    print(-s[2], -s[1], -s[0])


def reduce(args):
    from scipy import ndimage
    src, nx, ny, nz, out = args[0], int(args[1]), int(args[2]), int(args[3]), args[4]
    vol = np.fromfile(src, dtype="<f4").reshape(nz, ny, nx).astype(np.float64)
    w = np.array([1, 4, 6, 4, 1], dtype=np.float64) / 16
    for axis in range(3):
        vol = ndimage.correlate1d(vol, w, axis=axis, mode="nearest")
    vol[::2, ::2, ::2].astype("<f4").tofile(out)


if __name__ == "__main__":
    cmd = sys.argv[1]
    if cmd == "rotation":
        rotation(sys.argv[2])
    elif cmd == "resample":
        resample(sys.argv[2:])
    elif cmd == "shift":
        shift(sys.argv[2:])
    elif cmd == "reduce":
        reduce(sys.argv[2:])
    else:
        sys.exit("unknown command " + cmd)
