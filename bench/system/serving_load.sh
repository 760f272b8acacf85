#!/usr/bin/env bash
# End-to-end serving figures with plumb-load against real processes on loopback, each beside
# the empty-RPC floor (the gRPC health check) measured in the same run:
#   1. a synth world of 200,000 users x 110,000 tools (~104,000 reach the model), fitted
#      for one epoch at d = 64 (the figures depend on the catalogue's size, not on quality);
#   2. plumb-serve on it; health floor and Recommend (top-20, exclude seen) at 1, 2, 4, 8
#      calls in flight;
#   3. the exposure monitor off vs on, alternated twice at 4 in flight;
#   4. plumb-train started on the same store, and 10,000 events/s published to it by plumb-load
#      while it queries (the trainer trains and publishes new 100k-item versions meanwhile,
#      which plumb-serve loads and swaps in); the floor under the same stream.
# Clients and processes share the machine's cores. Prints a table at the end; every run's JSON
# report stays in the work directory when KEEP=1.
# Usage: bench/system/serving_load.sh BUILD_DIR [SECONDS_PER_RUN]
set -u
BIN=$1; SECS=${2:-8}
. "$(dirname "$0")/common.sh"
S=127.0.0.1:$(port); T=127.0.0.1:$(port)

echo "== world: 200,000 users x 110,000 tools, ~2.4 M interactions; one-epoch BPR fit at d = 64"
"$PLUMB" synth --out "$tmp/w" --users 200000 --items 110000 --interactions 2400000 --seed 7 \
  >/dev/null || exit 1
"$PLUMB" fit --events "$tmp/w/events.csv" --db "$tmp/db" --objective bpr --epochs 1 --dim 64 \
  2>&1 | tail -1
cut -d, -f1 "$tmp/w/events.csv" | tail -n +2 | sort -u >"$tmp/users.txt"

start_serve() {  # extra flags for plumb-serve
  "$SERVE" --db "$tmp/db" --listen "$S" --metrics "" --catchup-interval 500ms "$@" \
    >>"$tmp/serve.log" 2>&1 &
  serve_pid=$!; pids+=($serve_pid)
  wait_serving "$S" && return 0
  echo "plumb-serve did not become healthy; log:"; cat "$tmp/serve.log"; exit 1
}
stop_serve() { kill "$serve_pid"; wait "$serve_pid" 2>/dev/null; }

run() {  # name, then plumb-load flags
  local name=$1; shift
  "$LOAD" --server "$S" --users-file "$tmp/users.txt" --duration "${SECS}s" --warmup 1s \
    --json "$@" >"$tmp/$name.json" 2>"$tmp/$name.err" ||
    { echo "run $name failed:"; cat "$tmp/$name.err"; exit 1; }
  $PY - "$tmp/$name.json" "$name" <<'EOF'
import json, sys
r = json.load(open(sys.argv[1])); l = r["latency_us"]
line = ("  %-22s %7.0f calls/s  p50 %6.0f us  p90 %6.0f us  p99 %6.0f us  p99.9 %6.0f us  errors %d"
        % (sys.argv[2], r["requests_per_second"], l["p50_us"], l["p90_us"], l["p99_us"], l["p999_us"], r["errors"]))
if "publish" in r:
    p = r["publish"]
    line += "  | events acked %.0f/s, rejected %d, failed batches %d" % (
        p["acknowledged_per_second"], p["rejected"], p["errors"])
print(line)
EOF
}

echo "== plumb-serve alone"
start_serve
for c in 1 4; do run "floor-c$c" --rpc health --concurrency "$c"; done
for c in 1 2 4 8; do run "recommend-c$c" --rpc recommend --count 20 --concurrency "$c"; done
stop_serve

echo "== exposure monitor off vs on (alternated), Recommend at 4 in flight"
for round in 1 2; do
  start_serve --no-exposure-monitor
  run "monitor-off-$round" --rpc recommend --count 20 --concurrency 4
  stop_serve
  start_serve --exposure-monitor
  run "monitor-on-$round" --rpc recommend --count 20 --concurrency 4
  stop_serve
done

echo "== under 10,000 events/s to plumb-train on the same store (trainer trains and publishes)"
start_serve
"$TRAIN" --db "$tmp/db" --listen "$T" --metrics "" --objective bpr --dim 64 --threads 1 \
  --publish-interval 10s --idle-replay-passes 0 >"$tmp/train.log" 2>&1 &
pids+=($!)
wait_training "$T" 150
stream=(--publish-rate 10000 --publish-events-per-call 100 --trainer "$T" --items-file "$tmp/w/items.csv")
run "floor-c4-events" --rpc health --concurrency 4 "${stream[@]}"
run "recommend-c1-events" --rpc recommend --count 20 --concurrency 1 "${stream[@]}"
run "recommend-c4-events" --rpc recommend --count 20 --concurrency 4 "${stream[@]}"
echo "  versions served by plumb-serve during the run:"
grep -o "serving version [0-9]*.*" "$tmp/serve.log" | sed 's/^/    /' | tail -5
