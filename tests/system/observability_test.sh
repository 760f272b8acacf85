#!/usr/bin/env bash
# End to end observability: a store fitted offline, a real plumb-train and plumb-serve on
# loopback, a few hundred Recommend calls whose exposure statistics a client recomputes and
# finds equal to the server's gauges, then a real Prometheus (Debian's package) scraping both
# processes and finding the exposure gauges with plausible values.
# Usage: observability_test.sh BIN_DIR SOURCE_DIR
set -u
BIN=$1; SRC=$2
PLUMB=$BIN/cli/plumb; TRAIN=$BIN/trainer/online/plumb-train; SERVE=$BIN/server/plumb-serve
QUERY=$BIN/tools/plumb-query
PY=/usr/bin/python3; [ -x $PY ] || PY=python3
tmp=$(mktemp -d)
pids=()
cleanup() { for p in "${pids[@]}"; do kill -TERM "$p" 2>/dev/null; done; sleep 0.5;
            for p in "${pids[@]}"; do kill -KILL "$p" 2>/dev/null; done; rm -rf "$tmp"; }
trap cleanup EXIT
free_port() { $PY -c 'import socket; s=socket.socket(); s.bind(("127.0.0.1",0)); print(s.getsockname()[1])'; }
fail() { echo "FAIL: $*"; for f in "$tmp"/*.log; do echo "--- $f"; tail -20 "$f"; done; exit 1; }

"$PLUMB" synth --out "$tmp/world" --users 600 --items 300 --interactions 12000 --seed 21 >/dev/null 2>&1 \
  || fail "synth"
"$PLUMB" fit --events "$tmp/world/events.csv" --db "$tmp/db" --dim 16 --epochs 5 >/dev/null 2>"$tmp/fit.log" \
  || fail "fit"

TRAIN_ADDR=127.0.0.1:$(free_port); TRAIN_METRICS=127.0.0.1:$(free_port)
SERVE_ADDR=127.0.0.1:$(free_port); SERVE_METRICS=127.0.0.1:$(free_port)
# --refit-epochs 5: the same training configuration as the fit above, so the trainer keeps its
# version instead of rebuilding (a changed configuration would publish a new one mid-check).
"$TRAIN" --db "$tmp/db" --dim 16 --refit-epochs 5 --no-tune --listen "$TRAIN_ADDR" --metrics "$TRAIN_METRICS" >"$tmp/train.log" 2>&1 &
pids+=($!)
"$SERVE" --db "$tmp/db" --listen "$SERVE_ADDR" --metrics "$SERVE_METRICS" >"$tmp/serve.log" 2>&1 &
pids+=($!)
for _ in $(seq 150); do
  "$QUERY" health --server "$SERVE_ADDR" >/dev/null 2>&1 && "$QUERY" status --trainer "$TRAIN_ADDR" >/dev/null 2>&1 && break
  sleep 0.2
done
"$QUERY" health --server "$SERVE_ADDR" >/dev/null 2>&1 || fail "plumb-serve not healthy in 30 s"

users=$(awk -F, 'NR>1 {print $1}' "$tmp/world/events.csv" | sort -u | head -300 | paste -sd, -)
$PY "$SRC/tests/system/exposure_check.py" "$QUERY" "$SERVE_ADDR" "$SERVE_METRICS" \
  "$tmp/world/events.csv" "$users" 10 || fail "exposure gauges differ from the recomputed values"

bash "$SRC/tests/deploy/prometheus_scrape_test.sh" "$SERVE_METRICS" "$TRAIN_METRICS" \
  || fail "real Prometheus scrape of both processes"
echo "observability: all checks passed"
