#!/usr/bin/env bash
# Regenerates the README's pictures of the two status pages (docs/images/status-serve.png,
# docs/images/status-train.png): runs the status pages' system test, which starts both
# daemons on free loopback ports, streams a small synth world, sends traffic and saves a PNG
# of each page from headless chromium, with docs/images as its artifact directory.
# Usage: bash docs/status_screenshots.sh [BUILD_DIR]   (default build/dev)
set -euo pipefail
cd "$(dirname "$0")/.."
BUILD=${1:-build/dev}
bash tests/system/status_pages_test.sh "$BUILD" . docs/images
ls -l docs/images/status-serve.png docs/images/status-train.png
