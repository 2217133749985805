#!/usr/bin/env bash
# Volumes larger than memory (issue 17): segments a generated uint16 pair by slabs with otsu,
# median+otsu and sauvola and scores each mask against the reference scan's otsu mask, under
# /usr/bin/time -v (peak RSS, wall time); then the same on a small volume in memory (the default
# --memory-limit) and by slabs (a forced small limit), for the throughput ratio.
# usage: bench/stream_large.sh POREBENCH WORKDIR [NX NY NZ] [SMALL]
#   defaults 2048 2048 1024 (8 GiB per uint16 scan; ~35 GB of disk with the masks) and SMALL = 512.
# The files are deleted at the end (KEEP=1 keeps them). Goals (issue 17): peak RSS <= 3 GiB on the large pair;
# throughput by slabs (large) >= 80 % of the in-memory path on SMALL^3. The runs here are single; the
# throughput ratio in alternating rounds is bench/peers/stream_vs_memory.py (run with KEEP=1, then
# `bench/peers/stream_vs_memory.py POREBENCH WORKDIR/small WORKDIR/large`).
set -euo pipefail
PB=$(readlink -f "$1")
DIR=$2
NX=${3:-2048} NY=${4:-2048} NZ=${5:-1024} SMALL=${6:-512}
HERE=$(cd "$(dirname "$0")" && pwd)
mkdir -p "$DIR"
[ "${KEEP:-0}" = 1 ] || trap 'rm -rf "$DIR/large" "$DIR/small"' EXIT
echo "load before: $(uptime)"

# run NAME VOXELS CMD...: one timed run, one result row
run() {
  local name=$1 voxels=$2
  shift 2
  /usr/bin/time -v "$@" >"$DIR/out.txt" 2>"$DIR/time.txt" || { cat "$DIR/time.txt" >&2; exit 1; }
  local rss wall secs
  rss=$(awk -F': ' '/Maximum resident set size/ {print $2}' "$DIR/time.txt")
  wall=$(awk -F': ' '/Elapsed \(wall clock\)/ {print $2}' "$DIR/time.txt")
  secs=$(echo "$wall" | awk -F: '{ if (NF == 3) print $1 * 3600 + $2 * 60 + $3; else print $1 * 60 + $2 }')
  awk -v n="$name" -v v="$voxels" -v s="$secs" -v r="$rss" \
    'BEGIN { printf "%-34s %8.1f s  %8.1f Mvoxel/s  peak RSS %7.0f MiB\n", n, s, v / s / 1e6, r / 1024 }'
}

large=$((NX * NY * NZ)) small=$((SMALL * SMALL * SMALL))
# Generated unless present (a pair made beforehand with the same command is used as it is).
[ -f "$DIR/large/ref.mha" ] || /usr/bin/python3 "$HERE/make_large_pair.py" "$DIR/large" "$NX" "$NY" "$NZ"
[ -f "$DIR/small/ref.mha" ] || /usr/bin/python3 "$HERE/make_large_pair.py" "$DIR/small" "$SMALL" "$SMALL" "$SMALL"
echo "load after generating: $(uptime)"

L=$DIR/large S=$DIR/small
run "large reference otsu (slabs)" $large "$PB" segment otsu "$L/ref.mha" -o "$L/ref-otsu.mha"
# Sauvola with k = 0.5 (the paper's value): at scikit-image's 0.2 the noise of this data (sigma 2500
# on 30000) puts ~3 % of the material below the local threshold, millions of one-voxel "pores".
SAUVOLA=(--set k=0.5)
args() { [ "$1" = sauvola ] && echo "${SAUVOLA[@]}" || true; }
for m in otsu median+otsu sauvola; do
  run "large $m (slabs)" $large "$PB" segment $m "$L/test.mha" -o "$L/$m.mha" $(args $m)
  run "large score $m (slabs)" $large "$PB" score --pred "$L/$m.mha" --ref "$L/ref-otsu.mha" --bootstrap 200
  rm -f "$L/$m.mha"
done
for m in otsu median+otsu sauvola; do
  run "small $m (in memory)" $small "$PB" segment $m "$S/test.mha" -o "$S/$m-mem.mha" $(args $m)
  run "small $m (slabs)" $small "$PB" segment $m "$S/test.mha" -o "$S/$m-slab.mha" --memory-limit 64M $(args $m)
  cmp -s <(tail -c $small "$S/$m-mem.mha") <(tail -c $small "$S/$m-slab.mha") && echo "  same voxels" || echo "  VOXELS DIFFER"
done
echo "load after: $(uptime)"
