#!/usr/bin/env bash
# Recommend and SimilarItems end to end at 1,000,000 items x 64 on a trained model, the exact
# pruned scan against the approximate index, each beside the empty-RPC floor measured in the
# same run:
#   1. a synth world of 20,000 members x 1,000,000 tools (~2 M borrowings), fitted with CPR
#      (plumb's default) at d = 64 for 8 epochs: trained item vectors, whose uneven norms decide
#      how much the pruning and the index save;
#   2. plumb-serve with --approx-min-items 0 (exact only): time to serve, RSS, the floor
#      (health) and Recommend / SimilarItems at 1 and 4 in flight;
#   3. plumb-serve with the approximate indexes (otherwise its defaults): time to serve (load +
#      index build), RSS, the same calls.
# The version holds the tools borrowed at least once (about 410,000): bench_catalogue measures
# the full 1,000,000 server-side.
# Recall and popularity-group shares against exact are bench_catalogue's job (server-side, on
# the same kind of world). Percentiles are nearest-rank (tools/latency_record.h).
# Usage: bench/system/large_catalogue.sh BUILD_DIR [SECONDS_PER_RUN]
set -u
BIN=$1; SECS=${2:-10}
. "$(dirname "$0")/common.sh"
S=127.0.0.1:$(port)

echo "== world: 20,000 members x 1,000,000 tools, ~2 M borrowings; CPR fit at d = 64, 8 epochs"
"$PLUMB" synth --out "$tmp/w" --users 20000 --items 1000000 --interactions 2000000 --seed 7 \
  >/dev/null || exit 1
/usr/bin/time -f "fit: %e s wall, peak RSS %M KB" "$PLUMB" fit --events "$tmp/w/events.csv" \
  --db "$tmp/db" --epochs 8 --dim 64 2>&1 | tail -2
cut -d, -f1 "$tmp/w/events.csv" | tail -n +2 | sort -u >"$tmp/users.txt"
# Items to ask SimilarItems about: plumb-load ranks the file's ids by how often they occur
# and draws the r-th with weight 1/r (its --zipf 1), so popular tools are asked about most.
cut -d, -f2 "$tmp/w/events.csv" | tail -n +2 | shuf -n 200000 --random-source=<(yes) \
  >"$tmp/viewed.txt"

start_serve() {  # label, extra flags
  local label=$1; shift
  local t0; t0=$(date +%s.%N)
  "$SERVE" --db "$tmp/db" --listen "$S" --metrics "" "$@" >"$tmp/serve-$label.log" 2>&1 &
  serve_pid=$!; pids+=($serve_pid)
  wait_serving "$S" 3000 ||
    { echo "plumb-serve did not become healthy; log:"; cat "$tmp/serve-$label.log"; exit 1; }
  printf "  %-9s serving after %.1f s; RSS %s MB; %s\n" "$label" \
    "$($PY -c "import sys; print(float(sys.argv[1]) - float(sys.argv[2]))" "$(date +%s.%N)" "$t0")" \
    "$(awk '/VmRSS/ {printf "%.0f", $2/1024}' /proc/$serve_pid/status)" \
    "$(grep -o "serving version.*" "$tmp/serve-$label.log" | head -1)"
}
stop_serve() { kill "$serve_pid"; wait "$serve_pid" 2>/dev/null; }

run() {  # name, then plumb-load flags
  local name=$1; shift
  "$LOAD" --server "$S" --duration "${SECS}s" --warmup 1s --json "$@" >"$tmp/$name.json" \
    2>"$tmp/$name.err" || { echo "run $name failed:"; cat "$tmp/$name.err"; exit 1; }
  $PY - "$tmp/$name.json" "$name" <<'EOF'
import json, sys
r = json.load(open(sys.argv[1])); l = r["latency_us"]
print("  %-24s %7.0f calls/s  p50 %7.2f ms  p99 %7.2f ms  errors %d" % (
    sys.argv[2], r["requests_per_second"], l["p50_us"] / 1e3, l["p99_us"] / 1e3, r["errors"]))
EOF
}

for mode in exact approx; do
  echo "== $mode"
  # The fitted version holds the tools that were borrowed at least once (about 410,000 of
  # the 1,000,000), so the approximate run lowers approx_min_items to reach them.
  if [ $mode = exact ]; then start_serve exact --approx-min-items 0
  else start_serve approx --approx-min-items 1; fi
  run "$mode-floor-c1" --rpc health --concurrency 1
  for c in 1 4; do
    run "$mode-recommend-c$c" --rpc recommend --count 20 --concurrency $c \
      --users-file "$tmp/users.txt"
    run "$mode-similar-c$c" --rpc similar --count 20 --concurrency $c \
      --items-file "$tmp/viewed.txt"
  done
  stop_serve
done
