#!/usr/bin/env bash
# with_ro_folder.sh DIR COMMAND...: runs COMMAND with DIR a read-only file system (a small tmpfs
# mounted read-only; needs root), then unmounts it. Exit 77 (skipped) where it cannot mount.
dir=$1; shift
mkdir -p "$dir"
if ! mount -t tmpfs -o ro,size=1m tmpfs "$dir" 2>/dev/null; then
  echo "SKIP: cannot mount a read-only tmpfs here (needs root)"; exit 77
fi
"$@"; rc=$?
umount "$dir"
exit $rc
