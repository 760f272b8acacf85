#!/usr/bin/env bash
# Overload on loopback: plumb-serve with a 40,000-item model and 32 or 64 Recommend calls kept
# in flight by plumb-load on this (small) machine.
#  1. default settings: every call is answered (the calls beyond the running slots wait
#     their turn), and every call is counted in plumb_requests_total;
#  2. a tiny waiting line (--max-running-calls 1 --max-waiting-calls 4): the calls it refuses
#     get RESOURCE_EXHAUSTED and each one is counted, in plumb_requests_total and in
#     plumb_rejected_calls_total{reason="queue_full"};
#  3. fewer gRPC threads than calls (--rpc-threads 4): gRPC itself refuses calls before any
#     handler runs, and those are counted too (reason="thread_pool").
# Usage: overload_test.sh BIN_DIR
set -u
BIN=$1
PLUMB=$BIN/cli/plumb; SERVE=$BIN/server/plumb-serve; QUERY=$BIN/tools/plumb-query
LOAD=$BIN/tools/plumb-load
PY=/usr/bin/python3; [ -x $PY ] || PY=python3
tmp=$(mktemp -d); serve_pid=
cleanup() { [ -n "$serve_pid" ] && kill -KILL "$serve_pid" 2>/dev/null; rm -rf "$tmp"; }
trap cleanup EXIT
free_port() { $PY -c 'import socket; s=socket.socket(); s.bind(("127.0.0.1",0)); print(s.getsockname()[1])'; }
fail() { echo "FAIL: $*"; for f in "$tmp"/*.log; do echo "--- $f"; tail -15 "$f"; done; exit 1; }
json() { $PY -c "import json,sys; r=json.load(open(sys.argv[1])); k=sys.argv[2].split('.'); v=r[k[0]]
for x in k[1:]: v=v.get(x, 0)
print(v)" "$1" "$2"; }
# Sum of a metric's samples whose line contains every given label text.
metric() {
  local addr=$1 name=$2; shift 2
  curl -s "http://$addr/metrics" | awk -v m="$name" -v want="$*" '
    { n = split(want, w, " "); ok = index($1, m "{") == 1 || $1 == m
      for (i = 1; i <= n; i++) if (index($1, w[i]) == 0) ok = 0
      if (ok) s += $2 }
    END { printf "%d\n", s }'
}

"$PLUMB" synth --out "$tmp/world" --users 20000 --items 40000 --interactions 400000 --seed 6 \
  >/dev/null 2>&1 || fail synth
"$PLUMB" fit --events "$tmp/world/events.csv" --db "$tmp/db" --objective bpr --epochs 1 --dim 32 \
  >"$tmp/fit.log" 2>&1 || fail fit
awk -F, 'NR>1 {print $1}' "$tmp/world/events.csv" | sort -u > "$tmp/users.txt"

ADDR=127.0.0.1:$(free_port); METRICS=127.0.0.1:$(free_port)
start_serve() {
  "$SERVE" --db "$tmp/db" --listen "$ADDR" --metrics "$METRICS" "$@" >>"$tmp/serve.log" 2>&1 &
  serve_pid=$!
  for _ in $(seq 300); do "$QUERY" health --server "$ADDR" >/dev/null 2>&1 && return 0; sleep 0.2; done
  fail "plumb-serve never became healthy"
}
stop_serve() { kill -TERM "$serve_pid"; wait "$serve_pid" 2>/dev/null; serve_pid=; }
load() {  # name concurrency
  "$LOAD" --server "$ADDR" --users-file "$tmp/users.txt" --duration 4s --warmup 0s \
    --concurrency "$2" --count 20 --deadline 5s --json \
    >"$tmp/$1.json" 2>"$tmp/$1.log" || fail "plumb-load $1"
}

# ---- 1. defaults: 32 and 64 in flight queue, none fails -------------------------------------
start_serve
for c in 32 64; do
  load "default-c$c" "$c"
  requests=$(json "$tmp/default-c$c.json" requests); errors=$(json "$tmp/default-c$c.json" errors)
  p99=$(json "$tmp/default-c$c.json" latency_us.p99_us)
  echo "defaults, $c in flight: $requests calls, $errors errors, p99 ${p99%.*} us"
  [ "$errors" = 0 ] || fail "$c in flight: $(json "$tmp/default-c$c.json" errors_by_code)"
  [ "$requests" -gt 200 ] || fail "too few calls ($requests)"
done
counted=$(metric "$METRICS" plumb_requests_total 'method="Recommend"')
sent=$(( $(json "$tmp/default-c32.json" requests) + $(json "$tmp/default-c64.json" requests) ))
# Calls still in flight when plumb-load stops measuring are answered but not reported.
[ "$counted" -ge "$sent" ] && [ "$counted" -le $(( sent + 96 )) ] ||
  fail "plumb_requests_total counts $counted calls; plumb-load made $sent"
stop_serve

# ---- 2. a tiny waiting line refuses, and every refusal is counted ----------------------------
start_serve --max-running-calls 1 --max-waiting-calls 4
load tiny-line 64
refused=$(json "$tmp/tiny-line.json" errors_by_code.RESOURCE_EXHAUSTED)
counted=$(metric "$METRICS" plumb_requests_total 'code="RESOURCE_EXHAUSTED"')
queue_full=$(metric "$METRICS" plumb_rejected_calls_total 'reason="queue_full"')
# With 21 threads (1 + 4 + 16) for 64 calls, gRPC refuses some of them before the queue does.
pool=$(metric "$METRICS" plumb_rejected_calls_total 'reason="thread_pool"')
echo "1 running + 4 waiting, 64 in flight: $refused refused; counted $counted" \
  "($queue_full queue_full, $pool thread_pool)"
[ "$refused" -gt 0 ] || fail "no call was refused with 64 in flight and room for 5"
[ "$counted" -ge "$refused" ] && [ "$counted" -le $(( refused + 64 )) ] ||
  fail "plumb_requests_total counts $counted refusals; plumb-load saw $refused"
[ "$queue_full" -gt 0 ] && [ $(( queue_full + pool )) = "$counted" ] ||
  fail "plumb_rejected_calls_total: $queue_full queue_full + $pool thread_pool != $counted"
stop_serve

# ---- 3. gRPC's own thread limit: refused before any handler, still counted -------------------
start_serve --rpc-threads 4
load few-threads 32
refused=$(json "$tmp/few-threads.json" errors_by_code.RESOURCE_EXHAUSTED)
pool=$(metric "$METRICS" plumb_rejected_calls_total 'reason="thread_pool"' 'method="Recommend"')
counted=$(metric "$METRICS" plumb_requests_total 'code="RESOURCE_EXHAUSTED"')
echo "4 gRPC threads, 32 in flight: $refused refused by gRPC; counted $pool (thread_pool), $counted"
[ "$refused" -gt 0 ] || fail "gRPC refused nothing with 4 threads and 32 calls in flight"
[ "$pool" -ge "$refused" ] && [ "$pool" -le $(( refused + 32 )) ] ||
  fail "plumb_rejected_calls_total{thread_pool} = $pool; plumb-load saw $refused"
[ "$counted" = "$pool" ] || fail "plumb_requests_total RESOURCE_EXHAUSTED $counted != $pool"
stop_serve
echo "overload: all checks passed"
