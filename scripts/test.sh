#!/usr/bin/env bash
# Installs what is missing (build + reference libraries), builds, and runs every test with ctest.
set -euo pipefail
cd "$(dirname "$0")/.."
./scripts/setup.sh --tests
./scripts/build.sh
cd build && ctest --output-on-failure -j"$(nproc)"
