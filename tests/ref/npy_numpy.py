#!/usr/bin/python3
"""Reference for core/npy.cpp: .npy files written and read by numpy (numpy.lib.format, Debian
python3-numpy), the format's own implementation.

  npy_numpy.py write DIR   every dtype porebench reads (|u1 |b1 u2 i2 f4), C and Fortran order,
                           little and big endian, format versions 1.0, 2.0, 3.0, 3-D (z, y, x)
                           and 2-D (y, x); values from value() below, so the C++ side knows them.
  npy_numpy.py f8 DIR      float64 (numpy's default dtype) volumes, little and big endian, C and
                           Fortran order (f8_*.npy), values float32 cannot hold exactly, and beside
                           each numpy's own float32 rounding of it (astype(np.float32), round to
                           nearest even) as as32_*.npy: porebench must read the first as the second.
  npy_numpy.py arrays DIR  arrays of other shapes (4-D, 1-D, with a 1 axis, an empty one) as np.save
                           writes them: u1, u2 big endian, i2, f4 both byte orders, f8; values from
                           value_flat(); one Fortran-order 4-D array.
  npy_numpy.py check_array FILE DTYPE SHAPE...
                           np.load(FILE) must equal value_flat() exactly, with that dtype and shape.
  npy_numpy.py check FILE DTYPE [NZ NY NX]
                           np.load(FILE) must equal value() exactly, with that dtype and shape;
                           prints "ok" or exits 1 with the difference."""
import os
import sys

import numpy as np


def value(dtype, shape):
    """Element [z, y, x] of the test arrays (the same formula is in tests/test_npy.cpp)."""
    if len(shape) == 2:
        shape = (1,) + tuple(shape)
    z, y, x = np.indices(shape)
    k = x + 10 * y + 100 * z
    out = {
        "u1": (k * 7 + 3) % 256,
        "b1": (x + y + z) % 2,
        "u2": k * 61 + 300,
        "i2": -(k * 37) + 5,
        "f4": k * 0.5 - 3.25,
    }[dtype]
    return out.astype(np.dtype(dtype))


def value_flat(dtype, shape):
    """Element i (in C order) of the test arrays of any shape (the same formula is in tests/test_npy.cpp)."""
    i = np.arange(int(np.prod(shape))).reshape(shape)
    out = {"u1": (i * 7 + 3) % 256, "u2": i * 61 + 300, "i2": -(i * 37) + 5, "f4": i * 0.5 - 3.25,
           "f8": i * 0.1 + 1.0 / 3.0}[dtype]
    return out.astype(np.dtype(dtype))


def write_arrays(folder):
    os.makedirs(folder, exist_ok=True)
    n = 0
    for dtype, endian in [("u1", "|"), ("u2", ">"), ("i2", "<"), ("f4", "<"), ("f4", ">"), ("f8", "<")]:
        for shape in [(2, 3, 4, 5), (7,), (3, 1, 2)]:
            a = value_flat(dtype, shape)
            if endian != "|":
                a = a.astype(np.dtype(endian + dtype))
            name = "arr_%s_%s_%s.npy" % (dtype, {"<": "le", ">": "be", "|": "na"}[endian], "x".join(map(str, shape)))
            np.save(os.path.join(folder, name), a)
            n += 1
    np.save(os.path.join(folder, "arr_fortran.npy"), np.asfortranarray(value_flat("f4", (2, 3, 4, 5))))
    np.save(os.path.join(folder, "arr_empty.npy"), np.zeros((0, 3, 4), np.float32))
    print("wrote", n + 2)


def compare(path, dtype, shape, want):
    """Exit non-zero unless the file at path holds exactly `want` as dtype with this shape."""
    a = np.load(path)
    if a.dtype != np.dtype(dtype).newbyteorder("<") and a.dtype != np.dtype(dtype):
        sys.exit("dtype %s, expected %s" % (a.dtype, dtype))
    if a.shape != tuple(shape):
        sys.exit("shape %s, expected %s" % (a.shape, shape))
    if not np.array_equal(a, want):
        sys.exit("values differ at %s" % (np.argwhere(a != want)[:3].tolist(),))
    print("ok")


def check_array(path, dtype, shape):
    compare(path, dtype, shape, value_flat(dtype, shape))


def write(folder):
    os.makedirs(folder, exist_ok=True)
    n = 0
    for dtype in ["u1", "b1", "u2", "i2", "f4"]:
        endians = ["<", ">"] if dtype in ("u2", "i2", "f4") else ["|"]
        for shape in [(5, 4, 3), (4, 3)]:
            base = value(dtype, shape)
            if len(shape) == 2:
                base = base[0]
            for endian in endians:
                a = base.astype(np.dtype(endian + dtype) if endian != "|" else base.dtype)
                for order in ["C", "F"]:
                    arr = np.asfortranarray(a) if order == "F" else np.ascontiguousarray(a)
                    assert arr.flags.f_contiguous == (order == "F") or arr.ndim < 2
                    for version in [(1, 0), (2, 0), (3, 0)]:
                        name = "%s_%s_%s_%dd_v%d.npy" % (dtype, {"<": "le", ">": "be", "|": "na"}[endian], order,
                                                       len(shape), version[0])
                        with open(os.path.join(folder, name), "wb") as f:
                            np.lib.format.write_array(f, arr, version=version)
                        n += 1
    # np.save itself (version 1.0, C order) for a volume
    np.save(os.path.join(folder, "f4_save.npy"), value("f4", (5, 4, 3)))
    print("wrote", n + 1)


def write_f8(folder):
    os.makedirs(folder, exist_ok=True)
    z, y, x = np.indices((5, 4, 3))
    base = (x + 10 * y + 100 * z) * 0.1 + 1.0 / 3.0  # 0.1 and 1/3 are not float32 numbers
    base[0, 0, 0], base[0, 0, 1] = 0.5, -2.0         # two exact ones
    for endian in "<>":
        for order in "CF":
            a = base.astype(endian + "f8")
            a = np.asfortranarray(a) if order == "F" else np.ascontiguousarray(a)
            name = "%s_%s.npy" % ({"<": "le", ">": "be"}[endian], order)
            np.save(os.path.join(folder, "f8_" + name), a)
            np.save(os.path.join(folder, "as32_" + name), np.ascontiguousarray(a.astype(np.float32)))
    print("wrote", 8)


def check(path, dtype, shape):
    want = value(dtype, shape)
    compare(path, dtype, shape, want[0] if len(shape) == 2 else want)


if __name__ == "__main__":
    if sys.argv[1] == "write":
        write(sys.argv[2])
    elif sys.argv[1] == "f8":
        write_f8(sys.argv[2])
    elif sys.argv[1] == "arrays":
        write_arrays(sys.argv[2])
    elif sys.argv[1] == "check_array":
        check_array(sys.argv[2], sys.argv[3], tuple(int(s) for s in sys.argv[4:]))
    else:
        check(sys.argv[2], sys.argv[3], tuple(int(s) for s in sys.argv[4:]))
