#!/usr/bin/env bash
# CI part of issue 15: a clang build with AddressSanitizer + UndefinedBehaviorSanitizer (and
# libFuzzer coverage), its tests, and a timed run of every libFuzzer target from the seed corpus.
# Usage: fuzz/ci.sh [SECONDS_PER_TARGET]   (default 60). Build folder: build-asan/.
# Left out under the sanitizers (minutes each, covered by the Release run): the tests matching
# PB_ASAN_EXCLUDE, and the Python module (an instrumented module cannot load into Debian's python). A crash found by a fuzzer fails CI; its input (crash-*/timeout-*/oom-*) is left
# in build-asan/fuzz-findings/TARGET: add it to fuzz/regressions/TARGET once fixed.
set -euo pipefail
cd "$(dirname "$0")/.."
secs=${1:-60}
export CCACHE_BASEDIR=${CCACHE_BASEDIR:-$PWD}
launcher=(); command -v ccache >/dev/null && launcher=(-DCMAKE_CXX_COMPILER_LAUNCHER=ccache)
san="-fsanitize=address,undefined -fno-sanitize-recover=undefined -fno-omit-frame-pointer"
t0=$(date +%s)
cmake -S . -B build-asan -DCMAKE_BUILD_TYPE=RelWithDebInfo -DCMAKE_C_COMPILER=clang -DCMAKE_CXX_COMPILER=clang++ \
  "${launcher[@]}" -DCMAKE_CXX_FLAGS_RELWITHDEBINFO="-O1 -g1" \
  -DCMAKE_CXX_FLAGS="$san -fsanitize=fuzzer-no-link" -DCMAKE_EXE_LINKER_FLAGS="$san" \
  -DPOREBENCH_BENCH=OFF -DPOREBENCH_FUZZ=ON -DPOREBENCH_PYTHON=OFF >/dev/null
cmake --build build-asan -j"$(nproc)"
t1=$(date +%s)
echo "fuzz/ci.sh: sanitizer build $((t1 - t0)) s"
export ASAN_OPTIONS=detect_leaks=1:abort_on_error=1:strict_string_checks=1
export UBSAN_OPTIONS=print_stacktrace=1:halt_on_error=1
export LSAN_OPTIONS=suppressions=$PWD/fuzz/lsan.supp
# install_consumer links a plain program to the instrumented libporebench.so (no ASan runtime).
PB_ASAN_EXCLUDE=${PB_ASAN_EXCLUDE:-'committed reference|reference run|install_consumer'}
(cd build-asan && ctest -j"$(nproc)" --output-on-failure -E "$PB_ASAN_EXCLUDE")
t2=$(date +%s)
echo "fuzz/ci.sh: tests under ASan+UBSan $((t2 - t1)) s"
for t in header suite recipe results; do
  out=build-asan/fuzz-findings/$t
  rm -rf "$out" build-asan/fuzz-corpus/$t
  mkdir -p "$out" build-asan/fuzz-corpus/$t
  (cd "$out" && ../../fuzz/fuzz_$t -max_total_time="$secs" -timeout=10 -rss_limit_mb=2048 -max_len=65536 \
     -print_final_stats=1 ../../fuzz-corpus/$t "$OLDPWD/fuzz/corpus/$t" 2>&1 | tail -12)
done
t3=$(date +%s)
echo "fuzz/ci.sh: fuzzing $((t3 - t2)) s; total $((t3 - t0)) s"
