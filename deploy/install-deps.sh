#!/usr/bin/env bash
# Installs exactly the Debian (bookworm) packages that plumb's build, tests and demo need.
# Idempotent; run as root. Skips apt entirely when everything is already installed.
set -euo pipefail

PACKAGES=(
  # toolchain
  build-essential cmake ninja-build pkg-config git ca-certificates
  # libraries
  libgrpc++-dev protobuf-compiler-grpc libprotobuf-dev protobuf-compiler
  libeigen3-dev librocksdb-dev prometheus-cpp-dev libhnswlib-dev
  libcli11-dev libspdlog-dev libtomlplusplus-dev
  # the metrics address's HTTP server (status pages beside /metrics) and JSON
  libcivetweb-dev nlohmann-json3-dev
  libgtest-dev libgmock-dev libbenchmark-dev
  # NATS JetStream (events in, versions out to replicas): the C client, the server the tests
  # and benchmarks run, and zlib for the version bundles' CRC-32
  libnats-dev nats-server zlib1g-dev
  # the TLS test of the NATS connections makes its throwaway CA and certificates with it
  openssl
  # fuzzing (the Fuzz build type and CI's short fuzz runs): clang with libFuzzer
  clang libfuzzer-14-dev
  # bench_index_choice: faiss, the other index library, beside hnswlib (faiss's k-means and
  # flat searches run on BLAS: OpenBLAS rather than the slow reference build)
  libfaiss-dev libopenblas0-pthread
  # the formatting check of changed lines (deploy/check_format.sh)
  clang-format
  # tests and demo: a real Prometheus (promtool), Python reference checks and clients
  prometheus python3 python3-numpy python3-sklearn python3-grpcio python3-protobuf
  curl procps systemd
  # the status pages' system test: a real headless browser driven through WebDriver
  chromium chromium-driver python3-selenium
)

missing=()
for p in "${PACKAGES[@]}"; do
  if ! dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed"; then
    missing+=("$p")
  fi
done

if [ ${#missing[@]} -eq 0 ]; then
  echo "install-deps: all ${#PACKAGES[@]} packages present"
  exit 0
fi

if [ "$(id -u)" -ne 0 ]; then
  echo "install-deps: missing packages (${missing[*]}); run this script as root" >&2
  exit 1
fi

echo "install-deps: installing ${missing[*]}"
export DEBIAN_FRONTEND=noninteractive
apt-get update -qq
apt-get install -y -qq --no-install-recommends "${missing[@]}"
