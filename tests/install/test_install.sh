#!/usr/bin/env bash
# The installable library: `cmake --install BUILD --prefix P` into a temporary prefix, then a tiny
# consumer (tests/install/consumer) configured with find_package(porebench), built and run.
# Usage: test_install.sh BUILD_DIR WORK_DIR
set -euo pipefail
build=$1 work=$2
mkdir -p "$work" && work=$(realpath "$work")  # the library names its folder resolved
here=$(cd "$(dirname "$0")" && pwd)
rm -rf "$work"
mkdir -p "$work"
cmake --install "$build" --prefix "$work/prefix" >"$work/install.log"
for f in lib/libporebench.so lib/porebench/libporebench_torch.so lib/porebench/libporebench_onnx.so lib/porebench/libporebench_imgcodecs.so lib/porebench/libporebench_dicom.so include/porebench/metrics/score.hpp include/porebench/core/volume.hpp \
         lib/cmake/porebench/porebenchConfig.cmake lib/cmake/porebench/porebenchConfigVersion.cmake; do
  [ -e "$work/prefix/$f" ] || { echo "test_install: $f not installed" >&2; exit 1; }
done
launcher=()
command -v ccache >/dev/null && launcher=(-DCMAKE_CXX_COMPILER_LAUNCHER=ccache)
cmake -S "$here/consumer" -B "$work/consumer" -DCMAKE_PREFIX_PATH="$work/prefix" -DCMAKE_BUILD_TYPE=Release \
      "${launcher[@]}" >"$work/configure.log" 2>&1 || { cat "$work/configure.log"; exit 1; }
cmake --build "$work/consumer" >"$work/build.log" 2>&1 || { cat "$work/build.log"; exit 1; }
"$work/consumer/consumer"
# The LibTorch module, opened on first use from PREFIX/lib/porebench (beside libporebench.so)...
"$work/consumer/consumer" torch || { echo "test_install: the installed LibTorch module was not used" >&2; exit 1; }
# ...and, when it is missing, an error that names the module and every path tried (no crash).
mv "$work/prefix/lib/porebench/libporebench_torch.so" "$work/moved-torch-module.so"
set +e
msg=$("$work/consumer/consumer" torch 2>&1)
rc=$?
set -e
echo "$msg"
[ $rc = 1 ] && [[ "$msg" == *"cannot load the LibTorch"*"libporebench_torch.so (tried $work/prefix/lib/libporebench_torch.so, $work/prefix/lib/porebench/libporebench_torch.so, $work/prefix/lib/../lib/porebench/libporebench_torch.so)"* ]] ||
  { echo "test_install: a missing LibTorch module is not reported with the paths tried (exit $rc)" >&2; exit 1; }
