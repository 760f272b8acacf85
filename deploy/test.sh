#!/usr/bin/env bash
# The README's test command: installs packages, checks the formatting of changed C++ lines
# (deploy/check_format.sh), builds (warnings as errors) and runs the
# whole test suite through CTest, then builds the fuzz targets with libFuzzer and runs each
# briefly. Exits non-zero when any of it fails.
set -euo pipefail
cd "$(dirname "$0")/.."
bash deploy/install-deps.sh
# Formatting of the C++ lines changed since the check was introduced (well under a second).
# Exit 1 (a changed line is not formatted) fails the run; 2 (cannot check here, e.g. a
# shallow clone without the base commit) only warns.
format_rc=0
bash deploy/check_format.sh || format_rc=$?
if [ "$format_rc" -eq 1 ]; then exit 1; fi
if [ "$format_rc" -ne 0 ]; then echo "test: formatting not checked (see above)" >&2; fi
BUILD_DIR=${BUILD_DIR:-build/ci}
cmake -S . -B "$BUILD_DIR" -G Ninja -DCMAKE_BUILD_TYPE=Release -DPLUMB_WERROR=ON
cmake --build "$BUILD_DIR" -j "$(nproc)"
(cd "$BUILD_DIR" && ctest --output-on-failure -j 2 --timeout 900)

# Fuzzing: the fuzz targets built as real fuzzers (clang + libFuzzer, the Fuzz build type),
# each replaying the checked-in corpus and then fuzzing for PLUMB_FUZZ_SECONDS (about 2 min
# in all, plus about 6 min to build on 2 cores). PLUMB_CI_FUZZ=0 skips it.
if [ "${PLUMB_CI_FUZZ:-1}" != 0 ]; then
  FUZZ_DIR=${FUZZ_BUILD_DIR:-build/ci-fuzz}
  cmake -S . -B "$FUZZ_DIR" -G Ninja -DCMAKE_BUILD_TYPE=Fuzz -DCMAKE_CXX_COMPILER=clang++ \
    -DPLUMB_BUILD_BENCH=OFF -DPLUMB_FUZZ_SECONDS="${PLUMB_FUZZ_SECONDS:-20}"
  cmake --build "$FUZZ_DIR" -j "$(nproc)" --target fuzz_csv_import fuzz_ranker_requests \
    fuzz_ingest_events fuzz_store_records fuzz_version_reader
  (cd "$FUZZ_DIR" && ctest --output-on-failure -L fuzz --timeout 900)
fi
