#!/usr/bin/env bash
# Installs the Debian packages porebench needs, only those missing. Idempotent; fast when all present.
# Usage: scripts/setup.sh [--tests]   (--tests adds the Python reference libraries used by tests/)
#        scripts/setup.sh --list      (prints every package it would install, build and tests)
set -euo pipefail
build=(cmake g++ make pkg-config zlib1g-dev
       libinsighttoolkit5-dev libgdcm-dev libopencv-dev libeigen3-dev libfftw3-dev  # libgdcm-dev: DICOM (core/io_itk.cpp)
       libtomlplusplus-dev nlohmann-json3-dev libcli11-dev catch2 libbenchmark-dev libboost-dev
       libssl-dev libtorch-dev
       pybind11-dev python3-dev python3-numpy)  # the Python module (python/), built for /usr/bin/python3
tests=(python3-skimage python3-scipy python3-sklearn python3-statsmodels python3-pandas python3-numpy python3-markdown chromium
       python3-torch clang libfuzzer-14-dev libclang-rt-14-dev libomp-dev  # clang, libFuzzer, sanitizer runtimes, OpenMP for clang: fuzz/ci.sh
       slurm-wlm munge)  # a single-node Slurm for tests/slurm (shards as a job array)
want=("${build[@]}")
if [ "${1:-}" = "--list" ]; then echo "${build[*]} ${tests[*]}"; exit 0; fi
[ "${1:-}" = "--tests" ] && want+=("${tests[@]}")
missing=()
for p in "${want[@]}"; do
  dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed" || missing+=("$p")
done
if [ ${#missing[@]} -eq 0 ]; then exit 0; fi
echo "setup: installing ${missing[*]}" >&2
SUDO=""; [ "$(id -u)" -ne 0 ] && SUDO="sudo"
export DEBIAN_FRONTEND=noninteractive
$SUDO apt-get update -qq
$SUDO apt-get install -y -qq --no-install-recommends "${missing[@]}" >/dev/null
