#!/usr/bin/python3
"""Writes every input of the bad-input catalogue (cases.tsv) into the folder given as argv[1].
All data are invented: small volumes of a 'gear blank' grey-value pattern, then broken on purpose.
File formats: MetaImage (MetaIO), NRRD0004, NIfTI-1, as their format descriptions define them."""
import gzip, json, os, struct, sys, zlib
import numpy as np

W = sys.argv[1]
os.makedirs(W, exist_ok=True)


def p(name):
    return os.path.join(W, name)


def write(name, data, mode="wb"):
    with open(p(name), mode) as f:
        f.write(data)


def scan(n=16, dtype=np.uint16):
    """A part (bright disc) with a few dark pores, n^3 voxels."""
    z, y, x = np.mgrid[0:n, 0:n, 0:n]
    c = (n - 1) / 2
    v = np.where((x - c) ** 2 + (y - c) ** 2 < (0.4 * n) ** 2, 3000, 200).astype(np.float64)
    v[n // 2 - 1:n // 2 + 1, n // 2 - 1:n // 2 + 1, 3:5] = 300  # one pore
    v[4:6, 5:7, 4:6] = 300
    return v.astype(dtype)


MET = {np.uint8: "MET_UCHAR", np.uint16: "MET_USHORT", np.int16: "MET_SHORT", np.float32: "MET_FLOAT"}


def mha_header(dims, etype="MET_USHORT", ndims=None, spacing="0.01 0.01 0.01", extra=(), datafile="LOCAL",
               compressed=False, csize=None):
    lines = ["ObjectType = Image", "NDims = %s" % (ndims if ndims is not None else len(dims.split())),
             "BinaryData = True", "BinaryDataByteOrderMSB = False"]
    if compressed:
        lines.append("CompressedData = True")
        if csize is not None:
            lines.append("CompressedDataSize = %s" % csize)
    lines += ["ElementSpacing = %s" % spacing, "DimSize = %s" % dims] + list(extra)
    lines += ["ElementType = %s" % etype, "ElementDataFile = %s" % datafile]
    return ("\n".join(lines) + "\n").encode()


def mha(name, arr, **kw):
    dims = " ".join(str(d) for d in arr.shape[::-1])
    kw.setdefault("etype", MET[arr.dtype.type])
    write(name, mha_header(dims, **kw) + arr.tobytes())


good = scan()
mha("good.mha", good)
mha("good-float.mha", good.astype(np.float32))
body = good.tobytes()
# --- MetaImage: sizes ---
write("truncated.mha", mha_header("16 16 16") + body[: len(body) // 2])
write("header-only.mha", mha_header("16 16 16"))
write("longer.mha", mha_header("16 16 16") + body + b"\0" * 100)
comp = zlib.compress(body)
write("compressed-good.mha", mha_header("16 16 16", compressed=True, csize=len(comp)) + comp)
write("compressed-lies-size.mha", mha_header("16 16 16", compressed=True, csize=len(comp) * 3) + comp)
write("compressed-cut.mha", mha_header("16 16 16", compressed=True) + comp[: len(comp) // 2])
small = zlib.compress(body[: len(body) // 4])
write("compressed-short.mha", mha_header("16 16 16", compressed=True, csize=len(small)) + small)
write("compressed-more.mha", mha_header("16 16 8", compressed=True, csize=len(comp)) + comp)
write("compressed-garbage.mha", mha_header("16 16 16", compressed=True, csize=64) + os.urandom(64))
# --- MetaImage: absurd header values ---
for tag, nd in [("ndims-4294967296", "4294967296"), ("ndims-99999999999", "99999999999"), ("ndims-1e308", "1e308"),
                ("ndims-4", "4"), ("ndims-0", "0"), ("ndims-text", "three")]:
    write(tag + ".mha", mha_header("16 16 16", ndims=nd) + body)
write("dimsize-4294967296.mha", mha_header("4294967296 1 1") + body)
write("dimsize-negative.mha", mha_header("-16 16 16") + body)
write("dimsize-zero.mha", mha_header("0 16 16") + body)
write("dimsize-count.mha", mha_header("16 16", ndims=3) + body)
write("dimsize-1e308.mha", mha_header("1e308 16 16") + body)
write("spacing-nan.mha", mha_header("16 16 16", spacing="nan 0.01 0.01") + body)
write("spacing-negative.mha", mha_header("16 16 16", spacing="0.01 -0.01 0.01") + body)
write("spacing-inf.mha", mha_header("16 16 16", spacing="0.01 0.01 inf") + body)
write("type-double.mha", mha_header("16 16 16", etype="MET_DOUBLE") + body)
write("channels-3.mha", mha_header("16 16 16", extra=["ElementNumberOfChannels = 3"]) + body)
write("no-datafile.mha", b"ObjectType = Image\nNDims = 3\nDimSize = 16 16 16\nElementType = MET_USHORT\n")
write("garbage.mha", bytes(range(256)) * 8)
write("empty.mha", b"")
os.makedirs(p("folder.mha"), exist_ok=True)
write("detached.mhd", mha_header("16 16 16", datafile="detached-missing.raw"))
write("detached-short.raw", body[:1000])
write("detached-short.mhd", mha_header("16 16 16", datafile="detached-short.raw"))
big = "1000 1000 1000"
write("big-float.mha", mha_header(big, etype="MET_FLOAT"))
# --- NRRD ---
def nrrd(name, sizes="16 16 16", dimension=3, typ="ushort", encoding="raw", extra=(), data=body, spacings="0.01 0.01 0.01",
         magic="NRRD0004", blank=True):
    h = [magic, "type: %s" % typ, "dimension: %s" % dimension, "sizes: %s" % sizes, "encoding: %s" % encoding,
         "endian: little", "spacings: %s" % spacings] + list(extra)
    write(name, ("\n".join(h) + "\n" + ("\n" if blank else "")).encode() + data)
nrrd("good.nrrd")
nrrd("truncated.nrrd", data=body[:3000])
nrrd("longer.nrrd", data=body + b"x" * 10)
gz = gzip.compress(body)
nrrd("gzip-good.nrrd", encoding="gzip", data=gz)
nrrd("gzip-cut.nrrd", encoding="gzip", data=gz[: len(gz) // 2])
nrrd("dimension-4.nrrd", dimension=4, sizes="16 16 16 1")
nrrd("sizes-absurd.nrrd", sizes="99999999999999 16 16")
nrrd("spacings-nan.nrrd", spacings="nan 0.01 0.01")
nrrd("type-double.nrrd", typ="double")
nrrd("encoding-ascii.nrrd", encoding="ascii")
nrrd("no-blank-line.nrrd", blank=False, data=b"")
nrrd("bad-magic.nrrd", magic="NRRX0004")
# --- NIfTI-1 ---
def nifti(name, arr, data=None, gz=False):
    h = bytearray(352)
    struct.pack_into("<i", h, 0, 348)
    dims = arr.shape[::-1]
    struct.pack_into("<8h", h, 40, 3, dims[0], dims[1], dims[2], 1, 1, 1, 1)
    code = {np.uint8: 2, np.int16: 4, np.float32: 16, np.uint16: 512}[arr.dtype.type]
    struct.pack_into("<hh", h, 70, code, arr.dtype.itemsize * 8)
    struct.pack_into("<8f", h, 76, 1, 0.01, 0.01, 0.01, 1, 1, 1, 1)
    struct.pack_into("<f", h, 108, 352.0)
    struct.pack_into("<f", h, 112, 1.0)  # scl_slope
    h[344:348] = b"n+1\0"
    out = bytes(h) + (arr.tobytes() if data is None else data)
    write(name, gzip.compress(out) if gz else out)
nifti("good.nii", good)
nifti("truncated.nii", good, data=body[:100])
nifti("longer.nii", good, data=body + b"\0" * 64)
nifti("truncated.nii.gz", good, data=body[:100], gz=True)
# --- raw ---
write("scan.raw", body)
# --- non-finite voxels ---
for tag, val in [("posinf", np.inf), ("neginf", -np.inf), ("nan", np.nan)]:
    f = good.astype(np.float32)
    f[8, 8, 8] = val
    f[9, 8, 8] = val
    mha("%s.mha" % tag, f)
# --- masks ---
roi = np.zeros_like(good, dtype=np.uint8)
mha("roi-empty.mha", roi)
mha("roi-other-dims.mha", np.ones((8, 16, 16), np.uint8))
ref = (good == 300).astype(np.uint8)
mha("ref-mask.mha", ref)
mha("part-mask.mha", (good > 1000).astype(np.uint8) | ref)
mha("thin.mha", scan()[0:1])
# --- recipes and suites ---
write("recipe-garbage.toml", b"[phantom\ndims = = 3\n")
write("recipe-min-diameter.toml", b'name = "x"\n[phantom]\ndims = [16, 16, 16]\n')

def suite(name, body_extra="", crit="min_jaccard = 0.5", match="coverage:0.5", scan_file="good.mha", method="otsu"):
    text = f'''[suite]
name = "{name}"
description = "bad-input catalogue: invented gear blank"

[[dataset]]
name = "blank"
kind = "paired"
scan = "{scan_file}"
reference_mask = "ref-mask.mha"
part_mask = "part-mask.mha"

[[method]]
name = "{method}"

[calibration]
objective = "jaccard"
fraction = 0.4
gap_slices = 1

[scoring]
match = "{match}"

[criteria]
{crit}
{body_extra}'''
    write(name, text.encode())
suite("suite-good.toml")
suite("suite-good-2.toml", body_extra="# a second, different suite\n")
suite("suite-min-jaccard-inf.toml", crit="min_jaccard = inf")
suite("suite-min-jaccard-nan.toml", crit="min_jaccard = nan")
suite("suite-match-coverage7.toml", match="coverage:7")
suite("suite-nan-scan.toml", scan_file="nan.mha")
suite("suite-inf-scan.toml", scan_file="posinf.mha")
suite("suite-truncated-scan.toml", scan_file="truncated.mha")
suite("suite-missing-scan.toml", scan_file="no-such-scan.mha")
suite("suite-ndims-scan.toml", scan_file="ndims-4294967296.mha")


def synth_suite(name, overrides):
    """A suite of one synthetic dataset (demo-small with `overrides` as its set table) and otsu."""
    write(name, ('''[suite]
name = "big"
[[dataset]]
name = "g"
kind = "synthetic"
preset = "demo-small"
set = %s
[[method]]
name = "otsu"
[criteria]
min_jaccard = 0.5
''' % overrides).encode())


synth_suite("suite-synth-refproj.toml", "{ scan = { reference_projections = 2147483647 } }")
synth_suite("suite-synth-4096.toml", "{ phantom = { dims = [4096, 4096, 4096] } }")
write("suite-garbage.toml", bytes(range(1, 200)))
write("existing-file", b"not a folder\n")
# --- run folders for report ---
def run_folder(name, cells=True, suite_json=True, bad_cell=False, foreign=False):
    d = p(name)
    os.makedirs(d, exist_ok=True)
    if suite_json:
        # The top-level shape porebench writes (suites/preflight.cpp checks it before the cells).
        write(name + "/suite.json", json.dumps({"suite": {"name": "blank", "description": "", "path": "suite.toml"},
                                                 "suite_sha256": "a" * 64, "criteria": [],
                                                 "calibration": {"objective": "jaccard"}, "scoring": {},
                                                 "methods": [], "datasets": []}).encode())
    if cells:
        os.makedirs(d + "/cells", exist_ok=True)
        c = {"id": "blank/scan/otsu/0", "index": 0, "suite_sha256": ("b" if foreign else "a") * 64, "status": "failed"}
        write(name + "/cells/blank__scan__otsu__g0.json", json.dumps(c).encode())
        if bad_cell:
            write(name + "/cells/blank__scan__iso50__g0.json", b'{"id": "blank/scan/iso50/0", "ind')
run_folder("run-no-cells", cells=False)
run_folder("run-corrupt-cell", bad_cell=True)
run_folder("run-mixed", foreign=True)
run_folder("run-no-suite-json", suite_json=False)
# .npy (numpy.lib.format, written by numpy itself, then broken): data cut short; a float64 beyond float32
np.save(p("npy-full.npy"), scan(8, np.float32))
with open(p("npy-full.npy"), "rb") as f:
    full = f.read()
write("truncated.npy", full[:-5])
os.remove(p("npy-full.npy"))
huge = scan(8, np.float64)  # float64 is read as float32; 1e300 does not fit (float32 max ~3.4e38)
huge[4, 4, 4] = 1e300
np.save(p("float64-huge.npy"), huge)


def dicom_ct(name, rows, cols, pixel_spacing=None):
    """One DICOM Part 10 file, CT Image Storage, explicit VR little endian (DICOM PS3.10 file meta,
    PS3.5 encoding; from memory), uint16 voxels; Pixel Spacing (0028,0030) only when given."""
    def el(group, elem, vr, value):
        if len(value) % 2:
            value += b"\0" if vr == b"UI" else b" "
        if vr in (b"OB", b"OW"):
            return struct.pack("<HH", group, elem) + vr + b"\0\0" + struct.pack("<I", len(value)) + value
        return struct.pack("<HH", group, elem) + vr + struct.pack("<H", len(value)) + value
    us = lambda v: struct.pack("<H", v)
    ct, uid = b"1.2.840.10008.5.1.4.1.1.2", b"1.2.826.0.1.3680043.2.1125.99.2"
    meta = el(2, 1, b"OB", b"\0\1") + el(2, 2, b"UI", ct) + el(2, 3, b"UI", uid) + el(2, 0x10, b"UI", b"1.2.840.10008.1.2.1")
    data = (el(8, 0x16, b"UI", ct) + el(8, 0x18, b"UI", uid) + el(8, 0x60, b"CS", b"CT") + el(0x28, 2, b"US", us(1)) +
            el(0x28, 4, b"CS", b"MONOCHROME2") + el(0x28, 0x10, b"US", us(rows)) + el(0x28, 0x11, b"US", us(cols)))
    if pixel_spacing:
        data += el(0x28, 0x30, b"DS", pixel_spacing.encode())
    data += (el(0x28, 0x100, b"US", us(16)) + el(0x28, 0x101, b"US", us(16)) + el(0x28, 0x102, b"US", us(15)) +
             el(0x28, 0x103, b"US", us(0)) + el(0x7FE0, 0x10, b"OW", scan(rows)[0, :, :cols].astype("<u2").tobytes()))
    write(name, b"\0" * 128 + b"DICM" + el(2, 0, b"UL", struct.pack("<I", len(meta))) + meta + data)


dicom_ct("dicom-no-spacing.dcm", 16, 16)  # GDCM would read it at 1 mm
print("wrote the bad-input catalogue inputs into", W)
