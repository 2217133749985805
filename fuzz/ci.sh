#!/usr/bin/env bash
# CI part of issue 15 (run by .ci/run): a clang build with AddressSanitizer + UndefinedBehaviorSanitizer
# (and libFuzzer coverage) in build-asan/, its tests, then a timed run of every libFuzzer target
# (fuzz/fuzz_*.cpp) from the seed corpus fuzz/corpus/TARGET.
# Usage: fuzz/ci.sh [SECONDS_PER_TARGET]   (default 60; PB_JOBS parallel jobs, default nproc)
# A sanitizer report anywhere fails: every instrumented process (the tests, and the porebench
# processes they start, whose exit codes a test may not look at) writes its report to
# build-asan/sanitizer-logs/, and any file there fails the step with the report printed.
# Left out under the sanitizers (PB_ASAN_EXCLUDE; minutes each under ASan and covered by the
# Release run of .ci/run): the two re-runs of the quick suite against the committed reference;
# install_consumer (it links a plain program to the instrumented libporebench.so); and the Python
# module (an instrumented module cannot load into Debian's python).
# A fuzzer finding (crash-*, leak-*, timeout-*, oom-*) fails too; its input is left in
# build-asan/fuzz-findings/TARGET: add it to fuzz/regressions/TARGET once fixed (ctest runs those).
set -euo pipefail
cd "$(dirname "$0")/.."
secs=${1:-60}
jobs=${PB_JOBS:-$(nproc)}
export CCACHE_BASEDIR=${CCACHE_BASEDIR:-$PWD}
launcher=(); command -v ccache >/dev/null && launcher=(-DCMAKE_CXX_COMPILER_LAUNCHER=ccache)
# Every UB check is fatal, except pointer-overflow, kept recoverable so that fuzz/ubsan.supp can
# name the one ITK header that trips it (halt_on_error=1 still stops on any other report of it).
san="-fsanitize=address,undefined -fno-sanitize-recover=undefined -fsanitize-recover=pointer-overflow -fno-omit-frame-pointer"
targets=(header suite recipe results card)
t0=$(date +%s)
cmake -S . -B build-asan -DCMAKE_BUILD_TYPE=RelWithDebInfo -DCMAKE_C_COMPILER=clang -DCMAKE_CXX_COMPILER=clang++ \
  "${launcher[@]}" -DCMAKE_CXX_FLAGS_RELWITHDEBINFO="-O1 -g1" \
  -DCMAKE_CXX_FLAGS="$san -fsanitize=fuzzer-no-link" -DCMAKE_EXE_LINKER_FLAGS="$san" \
  -DCMAKE_SHARED_LINKER_FLAGS="$san" -DCMAKE_MODULE_LINKER_FLAGS="$san" \
  -DPOREBENCH_BENCH=OFF -DPOREBENCH_FUZZ=ON -DPOREBENCH_PYTHON=OFF >build-asan-configure.log 2>&1 || { cat build-asan-configure.log; exit 1; }
cmake --build build-asan -j"$jobs"
t1=$(date +%s)
echo "fuzz/ci.sh: sanitizer build $((t1 - t0)) s"

logs=$PWD/build-asan/sanitizer-logs
rm -rf "$logs" && mkdir -p "$logs"
export ASAN_OPTIONS=detect_leaks=1:abort_on_error=1:strict_string_checks=1:log_path=$logs/asan
export UBSAN_OPTIONS=print_stacktrace=1:halt_on_error=1:suppressions=$PWD/fuzz/ubsan.supp:log_path=$logs/ubsan
export LSAN_OPTIONS=suppressions=$PWD/fuzz/lsan.supp:print_suppressions=0
PB_ASAN_EXCLUDE=${PB_ASAN_EXCLUDE:-'committed reference|reference run|install_consumer'}
# Run without leak detection (PB_ASAN_NOLEAK): the tests that load OpenCV dnn (TBB threads) and
# LibTorch (libgomp threads) into one clang-built process (LLVM libomp): LeakSanitizer's tracer,
# which stops every thread to scan their stacks, dies there with SIGSEGV ("Tracer caught signal
# 11") at exit and aborts a passing test. Address and undefined-behaviour checks stay on for them.
# The card-error and thread-identity tests joined the first when they took the depthwise-separable
# models (OpenCV's grouped-convolution path): reproduced alone, and not caused by onnx.cpp's mallopt
# settings (removed for a try: the tracer still died).
PB_ASAN_NOLEAK=${PB_ASAN_NOLEAK:-'OpenCV dnn and LibTorch equal PyTorch|model cards: every error names the card|probability map is bit-identical for 1 and 2 threads'}
status=0
(cd build-asan && ctest -j"$jobs" --output-on-failure -E "$PB_ASAN_EXCLUDE|$PB_ASAN_NOLEAK") || status=1
(cd build-asan && ASAN_OPTIONS=${ASAN_OPTIONS/detect_leaks=1/detect_leaks=0} \
   ctest -j"$jobs" --output-on-failure -R "$PB_ASAN_NOLEAK" -E "$PB_ASAN_EXCLUDE") || status=1
if [ -n "$(ls -A "$logs")" ]; then
  echo "fuzz/ci.sh: sanitizer reports (build-asan/sanitizer-logs):" >&2
  for f in "$logs"/*; do echo "--- $f" >&2; head -60 "$f" >&2; done
  status=1
fi
t2=$(date +%s)
echo "fuzz/ci.sh: tests under ASan+UBSan $((t2 - t1)) s"
[ $status -eq 0 ] || { echo "fuzz/ci.sh: FAILED (tests or sanitizer reports above)" >&2; exit 1; }

# Fuzzing: the reports go to the output again (libFuzzer prints them with the input it saved).
export ASAN_OPTIONS=detect_leaks=1:abort_on_error=1:strict_string_checks=1
export UBSAN_OPTIONS=print_stacktrace=1:halt_on_error=1:suppressions=$PWD/fuzz/ubsan.supp
fuzz_one() {
  local t=$1 out=build-asan/fuzz-findings/$1 corpus=build-asan/fuzz-corpus/$1
  rm -rf "$out" "$corpus" && mkdir -p "$out" "$corpus"
  build-asan/fuzz/fuzz_"$t" -max_total_time="$secs" -timeout=10 -rss_limit_mb=2048 -max_len=65536 \
    -print_final_stats=1 -artifact_prefix="$out/" "$corpus" fuzz/corpus/"$t" >"$out/log.txt" 2>&1
}
# In batches of $jobs targets at a time.
report_one() {  # TARGET EXIT_STATUS
  local log=build-asan/fuzz-findings/$1/log.txt
  if [ "$2" -eq 0 ]; then
    echo "fuzz/ci.sh: fuzz_$1 clean: $(awk '/^stat::number_of_executed_units/ {print $2}' "$log") runs in ${secs} s"
  else
    echo "fuzz/ci.sh: fuzz_$1 FOUND a problem (exit $2; input in build-asan/fuzz-findings/$1):" >&2
    tail -60 "$log" >&2
    status=1
  fi
}
for ((i = 0; i < ${#targets[@]}; i += jobs)); do
  batch=("${targets[@]:i:jobs}")
  pids=()
  for t in "${batch[@]}"; do fuzz_one "$t" & pids+=($!); done
  for k in "${!batch[@]}"; do
    rc=0
    wait "${pids[k]}" || rc=$?
    report_one "${batch[k]}" "$rc"
  done
done
t3=$(date +%s)
echo "fuzz/ci.sh: fuzzing $((t3 - t2)) s; total $((t3 - t0)) s"
exit $status
