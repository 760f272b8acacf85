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
