#!/usr/bin/env bash
# examples/python/plumb_client.py against a live plumb-serve on loopback: the message classes
# are generated with Debian's protoc exactly as the example's docstring says, the example
# makes its three calls and its deliberately wrong ones, and each answer must come back as
# documented (a personal list; the popular fallback for an unknown user; INVALID_ARGUMENT for
# count 0; [] for an unknown item). With the server paused (SIGSTOP) every call ends with
# DEADLINE_EXCEEDED after its deadline and is not retried; with the server stopped, the
# client retries UNAVAILABLE with backoff and then reports it.
# Usage: python_client_test.sh BIN_DIR SOURCE_DIR PROTOC
set -u
BIN=$1; SRC=$2; PROTOC=$3
PLUMB=$BIN/cli/plumb; SERVE=$BIN/server/plumb-serve; QUERY=$BIN/tools/plumb-query
PY=/usr/bin/python3; [ -x $PY ] || PY=python3
tmp=$(mktemp -d)
serve_pid=
cleanup() {
  [ -n "$serve_pid" ] && kill -TERM "$serve_pid" 2>/dev/null && wait "$serve_pid" 2>/dev/null
  rm -rf "$tmp"
}
trap cleanup EXIT
fail() { echo "FAIL: $*"; [ -f "$tmp/out.txt" ] && cat "$tmp/out.txt"; exit 1; }
free_port() { $PY -c 'import socket; s=socket.socket(); s.bind(("127.0.0.1",0)); print(s.getsockname()[1])'; }

mkdir -p "$tmp/gen"
(cd "$SRC" && "$PROTOC" -I proto --python_out="$tmp/gen" proto/plumb/v1/ranker.proto) \
  || fail "protoc --python_out"
"$PLUMB" synth --out "$tmp/w" --users 300 --items 150 --interactions 5000 --seed 9 >/dev/null 2>&1 \
  || fail synth
"$PLUMB" fit --events "$tmp/w/events.csv" --db "$tmp/db" --dim 8 --epochs 3 >/dev/null 2>&1 || fail fit
ADDR=127.0.0.1:$(free_port)
"$SERVE" --db "$tmp/db" --listen "$ADDR" --metrics "" >"$tmp/serve.log" 2>&1 &
serve_pid=$!
for _ in $(seq 150); do "$QUERY" health --server "$ADDR" >/dev/null 2>&1 && break; sleep 0.2; done
user=$(awk -F, 'NR == 2 {print $1}' "$tmp/w/events.csv")

run() { PYTHONPATH="$tmp/gen" $PY "$SRC/examples/python/plumb_client.py" --server "$ADDR" "$@"; }
run --user "$user" --item t1 --candidates t1,t2,zzz >"$tmp/out.txt" 2>&1 || fail "example exited $?"
cat "$tmp/out.txt"
expect() { grep -qE "$1" "$tmp/out.txt" || fail "no line matching: $1"; echo "ok: $2"; }
expect "^recommend: \(\['t[0-9]+'(, 't[0-9]+'){4}\], [1-9][0-9]*, 'personal'\)$" "Recommend: 5 items, personal"
expect "^rank: \(\['t[12]', 't[12]'\], \['zzz'\], [1-9]" "RankCandidates: two ranked, the unknown one listed"
expect "^similar: \['t[0-9]+'(, 't[0-9]+'){4}\]$" "SimilarItems: 5 items"
expect "^recommend, unknown user: \(\['t[0-9]+'(, 't[0-9]+'){4}\], [1-9][0-9]*, 'popular'\)$" \
  "unknown user: NOT_FOUND handled with the marked popular fallback"
expect "^recommend, count 0 \(INVALID_ARGUMENT\): INVALID_ARGUMENT .*count" "count 0: INVALID_ARGUMENT naming the field, not retried"
expect "^similar, unknown item \(NOT_FOUND -> \[\]\): \[\]$" "unknown item: NOT_FOUND handled as []"
grep -q "retrying" "$tmp/out.txt" && fail "a call was retried while the server was up"

kill -STOP "$serve_pid"
start=$(date +%s%N)
run --user "$user" --deadline 0.3 >"$tmp/out.txt" 2>&1; rc=$?
kill -CONT "$serve_pid"
elapsed_ms=$(( ($(date +%s%N) - start) / 1000000 ))
cat "$tmp/out.txt"
[ $rc = 0 ] || fail "example exited $rc with the server paused"
expect "^recommend: DEADLINE_EXCEEDED \(the answer did not come in time\)" "server paused: DEADLINE_EXCEEDED"
grep -q "retrying" "$tmp/out.txt" && fail "DEADLINE_EXCEEDED was retried (the time budget is spent)"
# Four calls (recommend, its three wrong ones; the unknown-user one gets no second try) at
# 0.3 s each: about 1.2 s, never the retries' extra.
echo "ok: four calls timed out in $elapsed_ms ms"
[ "$elapsed_ms" -lt 5000 ] || fail "the paused run took $elapsed_ms ms"

kill -TERM "$serve_pid"; wait "$serve_pid" 2>/dev/null; serve_pid=
run --user "$user" >"$tmp/out.txt" 2>&1 || fail "example exited $? with the server down"
cat "$tmp/out.txt"
expect "Recommend: UNAVAILABLE .*retrying in 50 ms" "server down: UNAVAILABLE retried with backoff"
expect "Recommend: UNAVAILABLE .*retrying in 100 ms" "... twice"
expect "^recommend: UNAVAILABLE \(no version loaded yet, or the server is down\)" "then reported"
echo "python client example: all checks passed"
