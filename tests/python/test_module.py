#!/usr/bin/python3
"""The Python module (python/porebench_module.cpp) against the command line on the same files.

  test_module.py POREBENCH_CLI MODULE_DIR WORK_DIR

Run by ctest (python_module) with Debian's /usr/bin/python3 and its numpy 1.24. The command line is
the reference for the records: porebench.score must return what `porebench score --json` writes,
to the last digit (dicts compared exactly, the run context and the input paths aside), and
porebench.segment / porebench.synth the voxels the command line writes. Outside sources: numpy
(np.load of the command line's .npy, astype(np.float32) for float64 -> float32 rounding to nearest)
and the MetaImage format (text header, ElementDataFile = LOCAL, then the raw voxels; ITK's
documentation of MetaIO) read here without porebench.
"""
import json
import os
import subprocess
import sys
import warnings

import numpy as np

cli, module_dir, work = sys.argv[1:4]
sys.path.insert(0, module_dir)
import porebench  # noqa: E402

os.makedirs(work, exist_ok=True)
failures = []


def check(ok, what):
    print(("ok   " if ok else "FAIL ") + what)
    if not ok:
        failures.append(what)


def run(*args, expect=0):
    r = subprocess.run([cli, *args], capture_output=True, text=True)
    if r.returncode != expect:
        sys.exit(f"{' '.join(args)}: exit {r.returncode} (expected {expect})\n{r.stderr}")
    return r


def read_mha(path):
    """Uncompressed MetaImage: 'Key = value' lines up to ElementDataFile = LOCAL, then voxels."""
    with open(path, "rb") as f:
        data = f.read()
    header, pos = {}, 0
    while True:
        end = data.index(b"\n", pos)
        key, _, value = data[pos:end].decode().partition(" = ")
        header[key.strip()] = value.strip()
        pos = end + 1
        if key.strip() == "ElementDataFile":
            break
    assert header["ElementDataFile"] == "LOCAL" and header.get("CompressedData", "False") == "False"
    dtype = {"MET_UCHAR": np.uint8, "MET_USHORT": np.uint16, "MET_SHORT": np.int16, "MET_FLOAT": np.float32}[
        header["ElementType"]]
    nx, ny, nz = (int(v) for v in header["DimSize"].split())
    spacing = tuple(float(v) for v in header["ElementSpacing"].split())
    origin = tuple(float(v) for v in header["Offset"].split())
    return np.frombuffer(data[pos:], dtype=dtype).reshape(nz, ny, nx), spacing, origin


def without(record, *paths):
    """A deep copy without the named keys ('a.b' for nested ones)."""
    r = json.loads(json.dumps(record))
    for p in paths:
        *parents, last = p.split(".")
        d = r
        for k in parents:
            d = d.get(k) if isinstance(d, dict) else None
        if isinstance(d, dict):
            d.pop(last, None)
    return r


# --- synth: the volumes the command line writes --------------------------------------------------
syn_dir = os.path.join(work, "synth")
run("synth", "--preset", "demo-small", "-o", syn_dir)
with warnings.catch_warnings():
    warnings.simplefilter("error")
    syn = porebench.synth("demo-small")
truth, spacing, origin = read_mha(os.path.join(syn_dir, "truth-labels.mha"))
part, _, _ = read_mha(os.path.join(syn_dir, "part-mask.mha"))
check(np.array_equal(syn["truth_labels"], truth), "synth: truth labels equal the command line's truth-labels.mha")
check(np.array_equal(syn["part_mask"], part), "synth: part mask equals part-mask.mha")
check(tuple(syn["spacing_mm"]) == spacing and tuple(syn["origin_mm"]) == origin, "synth: spacing and origin as the file's")
scan_names = sorted(n[:-4] for n in os.listdir(syn_dir) if n.endswith("p.mha") or n == "reference-scan.mha")
check(sorted(syn["scans"]) == scan_names, f"synth: the scans {scan_names}")
for name in scan_names:
    vol, _, _ = read_mha(os.path.join(syn_dir, name + ".mha"))
    check(syn["scans"][name].dtype == vol.dtype and np.array_equal(syn["scans"][name], vol), f"synth: {name} voxels equal")
check(not syn["truth_labels"].flags.owndata and syn["truth_labels"].base is not None,
      "synth: arrays hand over porebench's buffers (not owned by numpy: no copy)")
check(porebench.synth("demo-small", seed=5)["recipe"] != syn["recipe"], "synth: an override (seed=5) changes the recipe")

# --- segment: the mask and record of `porebench segment --json` ----------------------------------
scan_name = [n for n in scan_names if n != "reference-scan"][0]
scan_file, part_file, truth_file = (os.path.join(syn_dir, n) for n in (scan_name + ".mha", "part-mask.mha",
                                                                         "truth-labels.mha"))
seg_file, seg_json = os.path.join(work, "seg.npy"), os.path.join(work, "seg.json")
run("segment", "otsu", scan_file, "--roi", part_file, "-o", seg_file, "--json", seg_json)
copies = porebench._input_copies()
mask, rec = porebench.segment(syn["scans"][scan_name], "otsu", roi=syn["part_mask"], spacing_mm=spacing,
                              origin_mm=origin)
check(porebench._input_copies() == copies, "segment: C-contiguous float32 and uint8 arrays read in place (no copy)")
cli_rec = json.load(open(seg_json))
check(np.array_equal(mask, np.load(seg_file)), "segment: mask equals the command line's (np.load)")
skip = ("context", "runtime_s", "input.path", "roi", "output")
check(without(rec, *skip) == without(cli_rec, *skip), "segment: record equals segment --json (context, runtime, paths aside)")
check(rec["input"]["path"] is None and rec["chosen"] == cli_rec["chosen"] and len(rec["chosen"]) > 0,
      "segment: what the method chose is returned")
mask_p, rec_p = porebench.segment(scan_file, "otsu", roi=part_file)
check(np.array_equal(mask_p, mask) and rec_p["input"] == cli_rec["input"], "segment: file paths read as the command line")

# --- score: the record of `porebench score --json` -----------------------------------------------
def cli_score(pred, extra=(), name="score.json"):
    out = os.path.join(work, name)
    run("score", "--pred", pred, "--ref", truth_file, "--roi", part_file, "--json", out, *extra)
    return json.load(open(out))


cli_rec = cli_score(seg_file)
copies = porebench._input_copies()
rec = porebench.score(mask, truth, roi=part, spacing_mm=spacing, origin_mm=origin)
check(porebench._input_copies() == copies, "score: C-contiguous arrays read in place (no copy)")
paths = ("context", "inputs.pred.path", "inputs.ref.path", "inputs.roi.path")
check(without(rec, *paths) == without(cli_rec, *paths), "score: record equals score --json to the last digit")
check(rec["overlap"] == cli_rec["overlap"] and rec["inputs"]["pred"]["path"] is None, "score: overlap block, array path None")
rec = porebench.score(seg_file, truth_file, roi=part_file)
check(without(rec, "context") == without(cli_rec, "context"), "score: file paths give the very record (paths too)")
rec = porebench.score(np.asfortranarray(mask), truth, roi=part, spacing_mm=spacing, origin_mm=origin)
check(porebench._input_copies() == copies + 1, "score: a Fortran-order array is copied once")
check(without(rec, *paths) == without(cli_rec, *paths), "score: the copy scores the same")
opts = ("--match", "iou:0.3", "--connectivity", "6", "--z-range", "10:80", "--bootstrap", "200", "--no-surface")
cli_opt = cli_score(seg_file, opts, "score-opts.json")
rec = porebench.score(mask, truth, roi=part, spacing_mm=spacing, origin_mm=origin, match="iou:0.3", connectivity=6,
                      z_range=(10, 80), bootstrap=200, surface=False)
check(without(rec, *paths) == without(cli_opt, *paths), "score: scoring options as the command line's")

# A probability map (float32), then the same as float64 (numpy's default): rounded to float32 as
# numpy's astype(np.float32) rounds, so the very same record (voxel hashes included).
rng = np.random.default_rng(7)
prob = np.clip((truth == 2) * 0.7 + rng.random(truth.shape) * 0.4, 0, 1).astype(np.float32)
prob_file, prob64_file = os.path.join(work, "prob.npy"), os.path.join(work, "prob64.npy")
np.save(prob_file, prob)
prob64 = prob.astype(np.float64) + rng.random(prob.shape) * 1e-9 * (prob < 0.5)
np.save(prob64_file, prob64)
cli_prob = cli_score(prob_file, (), "score-prob.json")
rec = porebench.score(prob, truth, roi=part, spacing_mm=spacing, origin_mm=origin)
check(without(rec, *paths) == without(cli_prob, *paths) and "probability" in rec,
      "score: probability map record (with the probability block) equals the command line's")
r64 = run("score", "--pred", prob64_file, "--ref", truth_file, "--roi", part_file, "--json",
          os.path.join(work, "score-prob64.json"))
cli_prob64 = json.load(open(os.path.join(work, "score-prob64.json")))
as32_file = os.path.join(work, "prob64as32.npy")
np.save(as32_file, prob64.astype(np.float32))  # numpy's float64 -> float32 rounding (to nearest)
cli_as32 = cli_score(as32_file, (), "score-prob64as32.json")
check(without(cli_prob64, *paths) == without(cli_as32, *paths),
      "float64 .npy: the command line scores what numpy's astype(float32) gives (voxel hashes equal)")
check("rounded" in r64.stderr, "float64 .npy: the command line notes the rounding")
with warnings.catch_warnings(record=True) as caught:
    warnings.simplefilter("always")
    rec = porebench.score(prob64, truth, roi=part, spacing_mm=spacing, origin_mm=origin)
check(without(rec, *paths) == without(cli_prob64, *paths), "float64 array: record equals the command line's on the f8 .npy")
check(any("rounded" in str(w.message) for w in caught), "float64 array: the rounding is warned")

# --- errors: ValueError with the command line's message ------------------------------------------
def cli_error(*args):
    r = run(*args, expect=2)
    return r.stderr.strip().splitlines()[-1].removeprefix("porebench: error: ")


def py_error(f, *a, **kw):
    try:
        f(*a, **kw)
    except ValueError as e:
        return str(e)
    return None


msg = cli_error("score", "--pred", prob_file, "--ref", truth_file, "--pred-label", "2")
check(py_error(porebench.score, prob_file, truth_file, pred_label=2) == msg, f"error as the command line's: {msg}")
msg = cli_error("score", "--pred", seg_file, "--ref", truth_file, "--z-range", "5-9")
check(py_error(porebench.score, seg_file, truth_file, z_range="5-9") == msg, f"error as the command line's: {msg}")
msg = cli_error("segment", "otsu", scan_file, "-o", os.path.join(work, "x.npy"), "--set", "bins=-3")
check(py_error(porebench.segment, scan_file, "otsu", bins=-3) == msg, f"error as the command line's: {msg}")
msg = py_error(porebench.score, mask.astype(np.int64), truth)
check(msg is not None and "int64" in msg, f"unsupported dtype named: {msg}")
msg = py_error(porebench.score, mask[:-1], truth)
check(msg is not None and "pred (array)" in msg, f"geometry mismatch names the array: {msg}")
msg = py_error(porebench.score, mask, truth, matchh="any")
check(msg is not None and "match" in msg, f"unknown scoring option: {msg}")

if failures:
    sys.exit(f"{len(failures)} checks failed")
print("all checks passed")
