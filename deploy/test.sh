#!/usr/bin/env bash
# The README's test command: installs packages, builds (warnings as errors) and runs the
# whole test suite through CTest. Exit status is CTest's.
set -euo pipefail
cd "$(dirname "$0")/.."
bash deploy/install-deps.sh
BUILD_DIR=${BUILD_DIR:-build/ci}
cmake -S . -B "$BUILD_DIR" -G Ninja -DCMAKE_BUILD_TYPE=Release -DPLUMB_WERROR=ON
cmake --build "$BUILD_DIR" -j "$(nproc)"
cd "$BUILD_DIR"
ctest --output-on-failure -j 2 --timeout 900
