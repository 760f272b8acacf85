# Sourced by the bench/system scripts once BIN (the build directory) is set: the binaries, a
# work directory $tmp removed at exit (kept with KEEP=1), the processes in $pids stopped at
# exit, a free loopback port picker and waits for the daemons to answer.
# shellcheck shell=bash
PLUMB=$BIN/cli/plumb; TRAIN=$BIN/trainer/online/plumb-train; SERVE=$BIN/server/plumb-serve
QUERY=$BIN/tools/plumb-query; LOAD=$BIN/tools/plumb-load
PY=/usr/bin/python3
tmp=$(mktemp -d); pids=()
# A script with other processes to stop defines its own cleanup after sourcing this file.
cleanup() {
  for p in "${pids[@]}"; do kill "$p" 2>/dev/null; done
  sleep 0.5
  if [ "${KEEP:-0}" = 1 ]; then echo "kept $tmp"; else rm -rf "$tmp"; fi
}
trap cleanup EXIT
# A free loopback port (the kernel's pick).
port() { $PY -c 'import socket; s=socket.socket(); s.bind(("127.0.0.1",0)); print(s.getsockname()[1])'; }
# wait_serving ADDRESS [TRIES]: 0 once plumb-serve at ADDRESS answers its health check, 1
# after TRIES (default 300) tries 0.2 s apart.
wait_serving() {
  for _ in $(seq "${2:-300}"); do "$QUERY" health --server "$1" >/dev/null 2>&1 && return 0; sleep 0.2; done
  return 1
}
# wait_training ADDRESS [TRIES]: the same for plumb-train's status.
wait_training() {
  for _ in $(seq "${2:-300}"); do "$QUERY" status --trainer "$1" >/dev/null 2>&1 && return 0; sleep 0.2; done
  return 1
}
