#!/usr/bin/env bash
# Both status pages in a real headless browser (issue 15): plumb-train and plumb-serve on
# loopback with a one-second history step, a small synth world streamed in, Recommend traffic
# from plumb-load and a few RankCandidates calls whose candidates carry hostile item ids
# (markup, quotes), then status_pages_check.py loads both pages in Debian's chromium through
# chromedriver and compares them with /status.json and the Prometheus scrape, checks that
# the console stayed clean and that no id turned into markup, and saves a PNG of each page.
# Skips (exit 77) only when no browser, chromedriver or python3-selenium is installed.
# Usage: status_pages_test.sh BIN_DIR SOURCE_DIR ARTIFACT_DIR
set -u
BIN=$1; SRC=$2; ART=$3
PY=/usr/bin/python3; [ -x $PY ] || PY=python3
for need in chromium chromedriver; do
  command -v $need >/dev/null || { echo "SKIP: $need is not installed (deploy/install-deps.sh installs it)"; exit 77; }
done
$PY -c 'import selenium' 2>/dev/null || { echo "SKIP: python3-selenium is not installed (deploy/install-deps.sh installs it)"; exit 77; }
. "$(dirname "$0")/common.sh"

"$PLUMB" synth --out "$tmp/world" --users 300 --items 150 --interactions 5000 --seed 5 \
  >/dev/null 2>&1 || fail "synth"
# Hostile item ids (ids are user data): markup and quotes, interacted with by a few users.
for u in m1 m2 m3 m4 m5 m6; do
  echo "$u,<script>alert(1)</script>" >> "$tmp/world/events.csv"
  echo "$u,\"t\"\" onmouseover=\"\"alert(2)\"" >> "$tmp/world/events.csv"
done
TRAIN_ADDR=127.0.0.1:$(free_port); TRAIN_METRICS=127.0.0.1:$(free_port)
SERVE_ADDR=127.0.0.1:$(free_port); SERVE_METRICS=127.0.0.1:$(free_port)
"$TRAIN" --db "$tmp/db" --listen "$TRAIN_ADDR" --metrics "$TRAIN_METRICS" --no-sync --dim 8 \
  --publish-interval 1s --holdout-fraction 0.05 --idle-replay-passes 1 \
  --status-history-step 1s >"$tmp/train.log" 2>&1 &
pids="$pids $!"
for _ in $(seq 150); do grep -q "plumb-train serving" "$tmp/train.log" && break; sleep 0.2; done
"$LOAD" replay --events "$tmp/world/events.csv" --trainer "$TRAIN_ADDR" --quiet \
  >/dev/null 2>&1 || fail "replay"
# One event the trainer rejects (a timestamp in the year 5138), so that a rejection shows.
printf 'user,item,ts\nm1,t1,99999999999999\n' > "$tmp/future.csv"
"$LOAD" replay --events "$tmp/future.csv" --trainer "$TRAIN_ADDR" --quiet >/dev/null 2>&1
"$SERVE" --db "$tmp/db" --listen "$SERVE_ADDR" --metrics "$SERVE_METRICS" \
  --catchup-interval 100ms --status-history-step 1s >"$tmp/serve.log" 2>&1 &
pids="$pids $!"
for _ in $(seq 300); do "$QUERY" health --server "$SERVE_ADDR" >/dev/null 2>&1 && break; sleep 0.2; done
"$QUERY" health --server "$SERVE_ADDR" >/dev/null 2>&1 || fail "plumb-serve never became healthy"

awk -F, 'NR > 1 {print $1}' "$tmp/world/events.csv" | sort -u > "$tmp/users.txt"
"$LOAD" --server "$SERVE_ADDR" --users-file "$tmp/users.txt" --duration 3s --warmup 0 \
  --rate 10 >/dev/null 2>&1 || fail "plumb-load"
for _ in $(seq 40); do
  "$QUERY" rank --server "$SERVE_ADDR" --user m7 \
    --candidates '<script>alert(1)</script>,t" onmouseover="alert(2)' >/dev/null 2>&1 \
    || fail "rank with hostile ids"
done
"$LOAD" --server "$SERVE_ADDR" --users-file "$tmp/users.txt" --duration 3s --warmup 0 \
  --rate 10 >/dev/null 2>&1 || fail "plumb-load"
sleep 2  # a few history points after the traffic

mkdir -p "$ART"
$PY "$SRC/tests/system/status_pages_check.py" --serve "$SERVE_METRICS" --train "$TRAIN_METRICS" \
  --screenshots "$ART" || fail "status pages"
