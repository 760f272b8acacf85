# Sourced by the tests/system scripts once BIN (the build directory) is set: the binaries,
# python3, a work directory $tmp removed at exit, the processes in $pids stopped at exit
# (TERM, then KILL after 5 s: a clean stop removes plumb-serve's scratch directory), a free
# loopback port picker and `fail`, which shows the tail of every log in $tmp.
# shellcheck shell=bash
PLUMB=$BIN/cli/plumb; TRAIN=$BIN/trainer/online/plumb-train; SERVE=$BIN/server/plumb-serve
QUERY=$BIN/tools/plumb-query; LOAD=$BIN/tools/plumb-load
PY=/usr/bin/python3; [ -x $PY ] || PY=python3
tmp=$(mktemp -d)
pids=
cleanup() {
  for p in $pids; do kill -TERM "$p" 2>/dev/null; done
  for p in $pids; do
    for _ in $(seq 50); do kill -0 "$p" 2>/dev/null || break; sleep 0.1; done
    kill -KILL "$p" 2>/dev/null
  done
  rm -rf "$tmp"
}
trap cleanup EXIT
free_port() { $PY -c 'import socket; s=socket.socket(); s.bind(("127.0.0.1",0)); print(s.getsockname()[1])'; }
fail() { echo "FAIL: $*"; for f in "$tmp"/*.log; do echo "--- $f"; tail -8 "$f"; done; exit 1; }
# start_pair: plumb-train (no fsync) and plumb-serve on the store $tmp/db at fresh loopback
# addresses $TRAIN_ADDR, $TRAIN_METRICS, $SERVE_ADDR, $SERVE_METRICS (logs train.log and
# serve.log in $tmp), each waited for up to 30 s; `fail` when one does not start.
start_pair() {
  TRAIN_ADDR=127.0.0.1:$(free_port); TRAIN_METRICS=127.0.0.1:$(free_port)
  SERVE_ADDR=127.0.0.1:$(free_port); SERVE_METRICS=127.0.0.1:$(free_port)
  "$TRAIN" --db "$tmp/db" --listen "$TRAIN_ADDR" --metrics "$TRAIN_METRICS" --no-sync \
    >"$tmp/train.log" 2>&1 &
  pids="$pids $!"
  for _ in $(seq 150); do grep -q "plumb-train serving" "$tmp/train.log" && break; sleep 0.2; done
  grep -q "plumb-train serving" "$tmp/train.log" || fail "plumb-train did not start"
  "$SERVE" --db "$tmp/db" --listen "$SERVE_ADDR" --metrics "$SERVE_METRICS" >"$tmp/serve.log" 2>&1 &
  pids="$pids $!"
  for _ in $(seq 150); do grep -q "plumb-serve listening" "$tmp/serve.log" && break; sleep 0.2; done
  grep -q "plumb-serve listening" "$tmp/serve.log" || fail "plumb-serve did not start"
}
