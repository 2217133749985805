#!/usr/bin/env bash
# Full-disk test: writes into a small tmpfs and checks that every command fails with exit 2 and
# "No space left on device", leaving neither a final-named output nor a temporary behind.
# Needs root to mount; exits 77 (skipped by ctest) with a message where it cannot.
# Usage: full_disk.sh PB_BINARY INPUT_DIR (the catalogue inputs, make_inputs.py)
set -u
pb=$1; in=$2
work=$(mktemp -d)
mnt=$work/full
mkdir -p "$mnt"
if ! mount -t tmpfs -o size=16k tmpfs "$mnt" 2>/dev/null; then
  echo "SKIP: cannot mount a small tmpfs here (needs root); the full-disk test did not run"
  rmdir "$mnt"; rmdir "$work"; exit 77
fi
fail=0
check() {  # check NAME RC OUTPUT FINAL...
  local name=$1 rc=$2 out=$3; shift 3
  local bad=""
  [ "$rc" -eq 2 ] || bad="$bad exit $rc (expected 2);"
  grep -qi "no space left on device" <<<"$out" || bad="$bad message lacks 'No space left on device';"
  for f in "$@"; do [ -e "$f" ] && bad="$bad left $f ($(stat -c %s "$f") bytes);"; done
  local tmp
  tmp=$(find "$mnt" -name '*.partial-*' | head -3)
  [ -z "$tmp" ] || bad="$bad left temporaries: $tmp;"
  if [ -n "$bad" ]; then echo "FAIL $name:$bad output: $out"; fail=1; else echo "ok   $name"; fi
}
clean() { find "$mnt" -mindepth 1 -delete; }
# A 64^3 scan, a solid shell around random air voxels (30 %): its pore mask does not fit in 16 KiB,
# raw (refused before writing) or compressed (about 29 KB; the short file is caught after writing).
/usr/bin/python3 - "$work/noise.mha" <<'PY'
import sys, numpy as np
rng = np.random.default_rng(7)
v = np.where(rng.random((64, 64, 64)) < 0.3, 0.1, 1.0) + rng.normal(0, 0.02, (64, 64, 64))
v[:2], v[-2:], v[:, :2], v[:, -2:], v[:, :, :2], v[:, :, -2:] = 1, 1, 1, 1, 1, 1
v = v.astype(np.float32)
h = "ObjectType = Image\nNDims = 3\nBinaryData = True\nBinaryDataByteOrderMSB = False\nElementSpacing = 0.01 0.01 0.01\nDimSize = 64 64 64\nElementType = MET_FLOAT\nElementDataFile = LOCAL\n"
open(sys.argv[1], "wb").write(h.encode() + v.tobytes())
PY
out=$("$pb" segment otsu "$work/noise.mha" -o "$mnt/mask.mha" 2>&1); check segment-raw $? "$out" "$mnt/mask.mha"; clean
out=$("$pb" segment otsu "$work/noise.mha" -o "$mnt/mask.mha" --compress 2>&1); check segment-compressed $? "$out" "$mnt/mask.mha"; clean
out=$("$pb" segment otsu "$work/noise.mha" -o "$mnt/mask.mha" --json "$mnt/mask.json" --compress 2>&1)
check segment-json $? "$out" "$mnt/mask.mha" "$mnt/mask.json"; clean
# Half full first: the 16^3 mask fits (2 pages), the JSON record after it does not.
head -c 8000 /dev/zero > "$mnt/filler"
out=$("$pb" segment otsu "$in/good.mha" -o "$mnt/m.mha" --json "$mnt/m.json" 2>&1)
check segment-json-after-mask $? "$out" "$mnt/m.json" "$mnt/m.mha"; clean
out=$("$pb" synth --preset demo-small -o "$mnt/synth" 2>&1)
check synth $? "$out" "$mnt/synth/reference-scan.mha" "$mnt/synth/truth-labels.mha" "$mnt/synth/manifest.json"; clean
out=$("$pb" run "$in/suite-good.toml" -o "$mnt/run" 2>&1)
check run $? "$out" "$mnt/run/results.json"; clean
umount "$mnt"; rm -rf "$work"
exit $fail
