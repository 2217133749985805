#!/usr/bin/env bash
# Installs what is missing, builds, and runs the main job on the built-in synthetic default.
set -euo pipefail
cd "$(dirname "$0")/.."
./scripts/setup.sh
./scripts/build.sh
./build/porebench demo -o results/demo
