#!/usr/bin/env bash
# A full disk under plumb-train, on a small tmpfs in a private mount namespace (needs root,
# or a kernel that lets unshare make one; skipped with a message otherwise):
#  1. events stream in until the disk is full (down to the 128 MB plumb-train keeps free for
#     RocksDB's upkeep): the call that cannot be written gets RESOURCE_EXHAUSTED, the trainer
#     logs the episode once and counts the failed writes;
#  2. space is freed: writing resumes without a restart, and the events not acknowledged
#     before are accepted on resend;
#  3. after a clean restart the log holds exactly the acknowledged events, none lost.
# Usage: disk_full_test.sh BIN_DIR        (exit 77 = skipped)
set -u
BIN=$1
if [ "${PLUMB_IN_MOUNT_NS:-0}" != 1 ]; then
  if command -v unshare >/dev/null && unshare -m true 2>/dev/null; then
    exec unshare -m --propagation private env PLUMB_IN_MOUNT_NS=1 bash "$0" "$@"
  fi
  echo "SKIPPED: cannot make a private mount namespace here (not root?); a tmpfs is needed"
  exit 77
fi
PLUMB=$BIN/cli/plumb; TRAIN=$BIN/trainer/online/plumb-train; QUERY=$BIN/tools/plumb-query
LOAD=$BIN/tools/plumb-load
PY=/usr/bin/python3; [ -x $PY ] || PY=python3
tmp=$(mktemp -d); train_pid=
cleanup() {
  if [ -n "$train_pid" ]; then kill -KILL "$train_pid" 2>/dev/null; wait "$train_pid" 2>/dev/null; fi
  umount "$tmp/small" 2>/dev/null; rm -rf "$tmp"
}
trap cleanup EXIT
free_port() { $PY -c 'import socket; s=socket.socket(); s.bind(("127.0.0.1",0)); print(s.getsockname()[1])'; }
fail() { echo "FAIL: $*"; tail -20 "$tmp/train.log"; exit 1; }
metric() { curl -s "http://$METRICS/metrics" | awk -v m="$1" '$1 == m {printf "%d\n", $2}'; }

mkdir -p "$tmp/small"
if ! mount -t tmpfs -o size=400m tmpfs "$tmp/small" 2>/dev/null; then
  echo "SKIPPED: cannot mount a tmpfs here"
  exit 77
fi
"$PLUMB" synth --out "$tmp/world" --users 20000 --items 5000 --interactions 200000 --seed 3 \
  >/dev/null 2>&1 || fail synth
events=$(( $(wc -l < "$tmp/world/events.csv") - 1 ))

ADDR=127.0.0.1:$(free_port); METRICS=127.0.0.1:$(free_port)
start_trainer() {
  "$TRAIN" --db "$tmp/small/db" --listen "$ADDR" --metrics "$METRICS" --dim 8 \
    --publish-interval 100000s --publish-every-events 1000000000 >>"$tmp/train.log" 2>&1 &
  train_pid=$!
  for _ in $(seq 150); do "$QUERY" status --trainer "$ADDR" >/dev/null 2>&1 && return 0; sleep 0.2; done
  fail "plumb-train did not come up"
}
start_trainer
avail=$(df -m --output=avail "$tmp/small" | tail -1)
# Leave 130 MB: 2 MB above the reserve (RocksDB preallocates its log file in large steps,
# so the very first writes may already be refused).
dd if=/dev/zero of="$tmp/small/filler" bs=1M count=$(( avail - 130 )) 2>/dev/null

# ---- 1. the disk fills --------------------------------------------------------------------
"$LOAD" replay --events "$tmp/world/events.csv" --trainer "$ADDR" --retries 0 --quiet \
  >"$tmp/replay1.log" 2>&1 && fail "replaying $events events onto a full disk succeeded"
acked=$(grep -o '([0-9]* events before it are acknowledged' "$tmp/replay1.log" | grep -o '[0-9]*')
[ -n "$acked" ] || fail "no acknowledged count in: $(cat "$tmp/replay1.log")"
grep -q "RESOURCE_EXHAUSTED.*No space left" "$tmp/replay1.log" || fail "the caller was not told: $(cat "$tmp/replay1.log")"
# Two more attempts within the same episode: still one error line in the log.
for _ in 1 2; do
  "$LOAD" replay --events "$tmp/world/events.csv" --trainer "$ADDR" --retries 0 --quiet \
    >/dev/null 2>&1 && fail "a write succeeded on a full disk"
done
sleep 1.5  # the metrics are refreshed once a second
failures=$(metric plumb_event_log_write_failures_total)
logged=$(grep -c "appending events to the log failed" "$tmp/train.log")
echo "disk full: $acked events acknowledged before it; $failures failed writes counted; $logged error line(s)"
[ "${failures:-0}" -ge 3 ] || fail "plumb_event_log_write_failures_total = $failures"
[ "$logged" = 1 ] || fail "the episode was logged $logged times"

# ---- 2. space comes back: writing resumes without a restart ---------------------------------
rm -f "$tmp/small/filler"
ok=0
for _ in $(seq 30); do
  if "$LOAD" replay --events "$tmp/world/events.csv" --trainer "$ADDR" --retries 0 --quiet \
       >"$tmp/replay2.log" 2>&1; then ok=1; break; fi
  sleep 1
done
[ "$ok" = 1 ] || fail "writes did not resume after space was freed: $(tail -1 "$tmp/replay2.log")"
grep -q "works again" "$tmp/train.log" || fail "the end of the episode was not logged"
echo "space freed: the whole file is acknowledged on resend"

# ---- 3. a clean restart: the log holds every acknowledged event once ------------------------
kill -TERM "$train_pid"; wait "$train_pid" 2>/dev/null; train_pid=
start_trainer
last=$("$QUERY" status --trainer "$ADDR" | awk '/^last sequence/ {print $3}')
echo "after restart the log ends at $last (file: $events events)"
[ "$last" = "$events" ] || fail "log ends at $last, expected $events (each event once)"
echo "disk full: all checks passed"
