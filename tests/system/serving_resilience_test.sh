#!/usr/bin/env bash
# Serving through model changes and trainer failure, with real processes on loopback:
#  1. hot swap under load: plumb-load keeps 4 Recommend calls in flight while events stream
#     into plumb-train, which publishes a version every second; at least 10 activations
#     reach plumb-serve during the run and not one call fails;
#  2. trainer outage: plumb-train is killed with SIGKILL and restarted while plumb-load runs
#     again; not one Recommend call fails, and the restarted trainer resumes.
# Usage: serving_resilience_test.sh BIN_DIR
set -u
BIN=$1
PLUMB=$BIN/cli/plumb; TRAIN=$BIN/trainer/online/plumb-train; SERVE=$BIN/server/plumb-serve
QUERY=$BIN/tools/plumb-query; LOAD=$BIN/tools/plumb-load
PY=/usr/bin/python3; [ -x $PY ] || PY=python3
tmp=$(mktemp -d)
train_pid=; serve_pid=; replay_pid=
cleanup() {
  for p in $replay_pid $train_pid $serve_pid; do kill -TERM "$p" 2>/dev/null; done; sleep 0.5
  for p in $replay_pid $train_pid $serve_pid; do kill -KILL "$p" 2>/dev/null; done
  rm -rf "$tmp"
}
trap cleanup EXIT
free_port() { $PY -c 'import socket; s=socket.socket(); s.bind(("127.0.0.1",0)); print(s.getsockname()[1])'; }
fail() { echo "FAIL: $*"; for f in "$tmp"/*.log; do echo "--- $f"; tail -15 "$f"; done; exit 1; }
json() { $PY -c "import json,sys; print(json.load(open(sys.argv[1]))[sys.argv[2]])" "$1" "$2"; }
metric() { curl -s "http://$1/metrics" | awk -v m="$2" '$1 == m {print $2}'; }

"$PLUMB" synth --out "$tmp/world" --users 2000 --items 800 --interactions 60000 --seed 4 >/dev/null 2>&1 || fail synth
head -1 "$tmp/world/events.csv" > "$tmp/first.csv"; sed -n '2,20001p' "$tmp/world/events.csv" >> "$tmp/first.csv"
head -1 "$tmp/world/events.csv" > "$tmp/rest.csv"; sed -n '20002,$p' "$tmp/world/events.csv" >> "$tmp/rest.csv"
# The calls' users: those with at least 5 distinct tools in the first part. plumb-train holds
# out 2 % of (user, tool) pairs, so a user with one or two pairs may be in no version yet, and
# a call for it is rightly NOT_FOUND (once seen in CI: a user with its only pairs held out).
awk -F, 'NR>1 && NR<=20001 {print $1 "," $2}' "$tmp/world/events.csv" | sort -u |
  awk -F, '{n[$1]++} END {for (u in n) if (n[u] >= 5) print u}' | sort > "$tmp/users.txt"
[ "$(wc -l < "$tmp/users.txt")" -ge 500 ] || fail "too few users with 5 tools: $(wc -l < "$tmp/users.txt")"

TRAIN_ADDR=127.0.0.1:$(free_port); SERVE_ADDR=127.0.0.1:$(free_port); SERVE_METRICS=127.0.0.1:$(free_port)
start_trainer() {
  "$TRAIN" --db "$tmp/db" --listen "$TRAIN_ADDR" --metrics "" --dim 16 --publish-interval 1s \
    --publish-every-events 1000000 --no-sync >>"$tmp/train.log" 2>&1 &
  train_pid=$!
  for _ in $(seq 150); do "$QUERY" status --trainer "$TRAIN_ADDR" >/dev/null 2>&1 && return 0; sleep 0.2; done
  fail "plumb-train did not come up"
}
start_trainer
"$LOAD" replay --events "$tmp/first.csv" --trainer "$TRAIN_ADDR" --quiet >/dev/null 2>&1 || fail "first replay"
"$SERVE" --db "$tmp/db" --listen "$SERVE_ADDR" --metrics "$SERVE_METRICS" --catchup-interval 100ms \
  >"$tmp/serve.log" 2>&1 &
serve_pid=$!
for _ in $(seq 300); do "$QUERY" health --server "$SERVE_ADDR" >/dev/null 2>&1 && break; sleep 0.2; done
"$QUERY" health --server "$SERVE_ADDR" >/dev/null 2>&1 || fail "plumb-serve never became healthy"

# ---- 1. hot swap under load ---------------------------------------------------------------
swaps_before=$(metric "$SERVE_METRICS" plumb_snapshot_swaps_total)
"$LOAD" replay --events "$tmp/rest.csv" --trainer "$TRAIN_ADDR" --rate 2000 --quiet \
  >"$tmp/replay.log" 2>&1 &
replay_pid=$!
# Deadline 5 s rather than the default 1 s: on a shared 2-core machine under other load a
# few calls took over 1 s (4 of 162,755 once, DEADLINE_EXCEEDED) with no swap involved; a swap
# that failed or blocked requests would still show as errors or as a stall past 5 s.
"$LOAD" --server "$SERVE_ADDR" --users-file "$tmp/users.txt" --duration 15s --concurrency 4 \
  --count 20 --deadline 5s --json >"$tmp/swap.json" 2>"$tmp/load1.log" || fail "plumb-load (hot swap)"
wait $replay_pid; replay_pid=
swaps_after=$(metric "$SERVE_METRICS" plumb_snapshot_swaps_total)
swaps=$(( ${swaps_after%.*} - ${swaps_before%.*} ))
requests=$(json "$tmp/swap.json" requests); errors=$(json "$tmp/swap.json" errors)
echo "hot swap: $requests Recommend calls, $errors errors, $swaps versions swapped in during the run"
[ "$errors" = 0 ] || fail "Recommend calls failed during hot swaps: $(json "$tmp/swap.json" errors_by_code)"
[ "$requests" -gt 100 ] || fail "too few calls ($requests)"
[ "$swaps" -ge 10 ] || fail "only $swaps swaps during the run (want >= 10)"

# ---- 2. trainer SIGKILL and restart while the server answers --------------------------------
"$LOAD" --server "$SERVE_ADDR" --users-file "$tmp/users.txt" --duration 8s --concurrency 4 \
  --count 20 --json >"$tmp/outage.json" 2>"$tmp/load2.log" &
load_pid=$!
sleep 2
kill -KILL "$train_pid"; wait "$train_pid" 2>/dev/null
echo "trainer killed"
sleep 3
start_trainer
echo "trainer restarted"
wait $load_pid || fail "plumb-load (outage)"
requests=$(json "$tmp/outage.json" requests); errors=$(json "$tmp/outage.json" errors)
echo "trainer outage: $requests Recommend calls, $errors errors"
[ "$errors" = 0 ] || fail "Recommend calls failed while the trainer was down: $(json "$tmp/outage.json" errors_by_code)"
[ "$requests" -gt 100 ] || fail "too few calls ($requests)"
last=$("$QUERY" status --trainer "$TRAIN_ADDR" | awk '/^last sequence/ {print $3}')
[ "$last" = "$(( $(wc -l < "$tmp/world/events.csv") - 1 ))" ] || fail "restarted trainer's log ends at $last"
echo "serving resilience: all checks passed"
