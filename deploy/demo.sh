#!/usr/bin/env bash
# The README's run command. On a fresh Debian bookworm machine, as root:
#   installs the packages, builds Release, generates a biased demo world (members of a
#   neighbourhood tool-lending library borrowing tools), starts plumb-train and plumb-serve on
#   loopback, streams the borrowings through EventIngest in time order, waits for an activated
#   version, and shows what plumb does: a few members' top-10 lists served by the online CPR
#   model beside the same members under an offline BPR model, and the exposure gauges.
#
#   deploy/demo.sh            run, leave the services up, print how to stop them
#   deploy/demo.sh --once     run, then stop everything and exit 0 (unattended)
#   deploy/demo.sh --stop     stop services a previous run left up
#
# Environment: PLUMB_DEMO_DIR (default /tmp/plumb-demo), BUILD_DIR (default build/release,
# relative to the repository), PLUMB_DEMO_SKIP_INSTALL=1 to skip apt, and the loopback
# addresses PLUMB_DEMO_SERVE (127.0.0.1:7400), PLUMB_DEMO_SERVE_METRICS (127.0.0.1:9464),
# PLUMB_DEMO_TRAIN (127.0.0.1:7601), PLUMB_DEMO_TRAIN_METRICS (127.0.0.1:9465).
set -euo pipefail
cd "$(dirname "$0")/.."
ROOT=$(pwd)
DEMO=${PLUMB_DEMO_DIR:-/tmp/plumb-demo}
BUILD=${BUILD_DIR:-build/release}
SERVE_ADDR=${PLUMB_DEMO_SERVE:-127.0.0.1:7400}
SERVE_METRICS=${PLUMB_DEMO_SERVE_METRICS:-127.0.0.1:9464}
TRAIN_ADDR=${PLUMB_DEMO_TRAIN:-127.0.0.1:7601}
TRAIN_METRICS=${PLUMB_DEMO_TRAIN_METRICS:-127.0.0.1:9465}
MODE=${1:-}

say() { printf '\n\033[1m== %s\033[0m\n' "$*"; }
stop_services() {
  for name in plumb-serve plumb-train; do
    if [ -f "$DEMO/$name.pid" ]; then
      pid=$(cat "$DEMO/$name.pid")
      if kill -0 "$pid" 2>/dev/null; then
        kill -TERM "$pid" 2>/dev/null || true
        for _ in $(seq 50); do kill -0 "$pid" 2>/dev/null || break; sleep 0.1; done
        kill -KILL "$pid" 2>/dev/null || true
      fi
      rm -f "$DEMO/$name.pid"
    fi
  done
}

# Waits until NAME's log shows MARKER; if the process exits first (an address in use, say),
# shows why and stops the demo.
wait_started() {
  local name=$1 marker=$2
  for _ in $(seq 300); do
    grep -q "$marker" "$DEMO/$name.log" 2>/dev/null && return 0
    if ! kill -0 "$(cat "$DEMO/$name.pid")" 2>/dev/null; then
      echo "$name exited at start; its log ($DEMO/$name.log) ends:" >&2
      tail -5 "$DEMO/$name.log" >&2
      exit 1
    fi
    sleep 0.1
  done
  echo "$name did not report ready within 30 s; see $DEMO/$name.log" >&2
  exit 1
}

if [ "$MODE" = "--stop" ]; then
  stop_services
  echo "demo services stopped"
  exit 0
fi
if [ -n "$MODE" ] && [ "$MODE" != "--once" ]; then
  echo "usage: deploy/demo.sh [--once|--stop]" >&2
  exit 2
fi

started=$(date +%s)
if [ "${PLUMB_DEMO_SKIP_INSTALL:-0}" != 1 ]; then
  say "Installing Debian packages"
  bash deploy/install-deps.sh
fi

say "Building (Release) into $BUILD"
# A fresh clone has no build/ yet: make the tree before anything is written into it.
mkdir -p "$BUILD"
cmake -S . -B "$BUILD" -G Ninja -DCMAKE_BUILD_TYPE=Release -DPLUMB_BUILD_TESTS=OFF \
  -DPLUMB_BUILD_BENCH=OFF > "$BUILD/demo-configure.log" 2>&1 \
  || { cat "$BUILD/demo-configure.log"; exit 1; }
cmake --build "$BUILD" -j "$(nproc)" --target plumb plumb-train plumb-serve plumb-load plumb-query
case "$BUILD" in /*) BIN=$BUILD ;; *) BIN=$ROOT/$BUILD ;; esac
PLUMB=$BIN/cli/plumb
QUERY=$BIN/tools/plumb-query
LOAD=$BIN/tools/plumb-load

stop_services
rm -rf "$DEMO"
mkdir -p "$DEMO"
# --once stops the services at the end; a demo that fails never leaves them running.
trap 'rc=$?; if [ "$rc" != 0 ] || [ "$MODE" = "--once" ]; then stop_services; fi' EXIT

say "Generating the lending library (members borrow what the shelf by the door shows them)"
"$PLUMB" synth --out "$DEMO/world" --users 3000 --items 1500 --interactions 120000 --seed 42

say "Starting plumb-train ($TRAIN_ADDR, metrics $TRAIN_METRICS) and plumb-serve ($SERVE_ADDR, metrics $SERVE_METRICS)"
"$BIN/trainer/online/plumb-train" --db "$DEMO/db" --listen "$TRAIN_ADDR" --metrics "$TRAIN_METRICS" \
  --dim 32 --publish-every-events 40000 --publish-interval 5s --holdout-fraction 0.02 \
  > "$DEMO/plumb-train.log" 2>&1 &
echo $! > "$DEMO/plumb-train.pid"
wait_started plumb-train "plumb-train serving"
"$BIN/server/plumb-serve" --db "$DEMO/db" --listen "$SERVE_ADDR" --metrics "$SERVE_METRICS" \
  > "$DEMO/plumb-serve.log" 2>&1 &
echo $! > "$DEMO/plumb-serve.pid"
wait_started plumb-serve "plumb-serve listening"

say "Streaming $(($(wc -l < "$DEMO/world/events.csv") - 1)) borrowings through EventIngest in time order"
"$LOAD" replay --events "$DEMO/world/events.csv" --trainer "$TRAIN_ADDR"

say "Waiting for the trainer to train on every event (plus its idle replay passes) and activate the result"
ok=0
for _ in $(seq 360); do
  last=$("$QUERY" status --trainer "$TRAIN_ADDR" 2>/dev/null | awk '/^last sequence/ {print $3}')
  idle=$("$QUERY" status --trainer "$TRAIN_ADDR" 2>/dev/null | awk '/^idle/ {print $2}')
  seen=$("$QUERY" versions --trainer "$TRAIN_ADDR" 2>/dev/null | awk '$1 == "*" {print $6}')
  if [ -n "$last" ] && [ "$last" != 0 ] && [ -n "$seen" ] && [ "$idle" = yes ] \
     && "$QUERY" health --server "$SERVE_ADDR" >/dev/null 2>&1; then
    ok=1
    break
  fi
  sleep 0.5
done
[ $ok = 1 ] || { echo "no active version covering all events after 180 s; see $DEMO/plumb-train.log" >&2; exit 1; }
sleep 1  # one catch-up interval of plumb-serve, so it serves that version
"$QUERY" status --trainer "$TRAIN_ADDR"
"$QUERY" versions --trainer "$TRAIN_ADDR"

say "For contrast: offline fits of the same borrowings, CPR (what the trainer runs) and plain BPR"
"$PLUMB" fit --events "$DEMO/world/events.csv" --db "$DEMO/cpr-db" --objective cpr --dim 32 \
  --epochs 20 --holdout-fraction 0.02 2>"$DEMO/cpr-fit.log"
"$PLUMB" fit --events "$DEMO/world/events.csv" --db "$DEMO/bpr-db" --objective bpr --dim 32 \
  --epochs 20 --holdout-fraction 0.02 2>"$DEMO/bpr-fit.log"

MEMBERS=$(awk -F, 'NR>1 {print $1}' "$DEMO/world/events.csv" | sort | uniq -c | sort -rn \
  | awk 'NR==40 || NR==400 || NR==1200 {print $2}')
for m in $MEMBERS; do
  say "Member $m"
  echo "-- served by plumb-serve (online CPR):"
  "$QUERY" recommend --server "$SERVE_ADDR" --user "$m" --count 10 --names "$DEMO/world/items.csv"
  echo "-- the offline BPR model:"
  "$PLUMB" top --db "$DEMO/bpr-db" --user "$m" --count 10 --names "$DEMO/world/items.csv"
done

say "Sending Recommend traffic for 5 s to fill the exposure window"
awk -F, 'NR>1 {print $1}' "$DEMO/world/events.csv" | sort -u > "$DEMO/users.txt"
"$LOAD" --server "$SERVE_ADDR" --users-file "$DEMO/users.txt" --duration 5s --concurrency 4 --count 20

say "Exposure gauges from http://$SERVE_METRICS/metrics"
curl -s "http://$SERVE_METRICS/metrics" | grep -E '^plumb_(exposure|interaction)_' || true

say "Evaluated on the ground-truth test (members' true tastes, not what they were shown)"
echo "-- the online CPR version (streamed into plumb-train):"
"$PLUMB" eval --db "$DEMO/db" --test "$DEMO/world/test.csv" --k 20
echo "-- an offline CPR fit of the same borrowings:"
"$PLUMB" eval --db "$DEMO/cpr-db" --test "$DEMO/world/test.csv" --k 20
echo "-- an offline BPR fit of the same borrowings:"
"$PLUMB" eval --db "$DEMO/bpr-db" --test "$DEMO/world/test.csv" --k 20

say "Done in $(( $(date +%s) - started )) s"
cat <<INFO
  ranking endpoint  $SERVE_ADDR   (plumb.v1.Ranker; try: $QUERY recommend --server $SERVE_ADDR --user m1)
  event ingest      $TRAIN_ADDR   (plumb.v1.EventIngest, plumb.v1.ModelControl)
  metrics           http://$SERVE_METRICS/metrics  http://$TRAIN_METRICS/metrics
  status pages      http://$SERVE_METRICS/  http://$TRAIN_METRICS/   (open in a browser)
  logs              $DEMO/plumb-serve.log  $DEMO/plumb-train.log
INFO
if [ "$MODE" = "--once" ]; then
  echo "  (--once: stopping the services)"
else
  echo "  stop them with: bash deploy/demo.sh --stop"
fi
