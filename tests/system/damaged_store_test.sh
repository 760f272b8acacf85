#!/usr/bin/env bash
# A damaged store met by the real binaries (loopback):
#  1. a table file deleted: plumb-serve refuses to start and names the file (before: it
#     served an older version with health SERVING), plumb inspect and inspect --verify exit
#     non-zero naming it (before: exit 0 with wrong figures);
#  2. plumb repair brings it back: inspect --verify is clean, plumb-serve serves;
#  3. CURRENT and the write-ahead log deleted: plumb-train refuses to start and deletes
#     nothing (before: it created an empty store and deleted every table file); plumb repair
#     brings the store back with every event, and plumb-train starts on it.
# Usage: damaged_store_test.sh BIN_DIR
set -u
BIN=$1
PLUMB=$BIN/cli/plumb; TRAIN=$BIN/trainer/online/plumb-train; SERVE=$BIN/server/plumb-serve
QUERY=$BIN/tools/plumb-query
PY=/usr/bin/python3; [ -x $PY ] || PY=python3
tmp=$(mktemp -d); pids=()
cleanup() {
  for p in "${pids[@]}"; do kill -KILL "$p" 2>/dev/null; wait "$p" 2>/dev/null; done
  rm -rf "$tmp"
}
trap cleanup EXIT
free_port() { $PY -c 'import socket; s=socket.socket(); s.bind(("127.0.0.1",0)); print(s.getsockname()[1])'; }
fail() { echo "FAIL: $*"; for f in "$tmp"/*.log; do echo "--- $f"; tail -8 "$f"; done; exit 1; }
newest_sst() { ls "$1"/*.sst | sort -V | tail -1; }

"$PLUMB" synth --out "$tmp/world" --users 500 --items 300 --interactions 8000 --seed 9 >/dev/null 2>&1 ||
  fail synth
"$PLUMB" fit --events "$tmp/world/events.csv" --db "$tmp/good" --dim 8 --epochs 2 >/dev/null 2>&1 || fail fit
"$PLUMB" fit --db "$tmp/good" --dim 8 --epochs 2 >/dev/null 2>&1 || fail "second fit"
events=$(( $(wc -l < "$tmp/world/events.csv") - 1 ))
user=$(awk -F, 'NR==2 {print $1}' "$tmp/world/events.csv")

# ---- 1. a missing table file ------------------------------------------------------------
cp -r "$tmp/good" "$tmp/db1"
victim=$(basename "$(newest_sst "$tmp/db1")")
rm "$tmp/db1/$victim"
ADDR=127.0.0.1:$(free_port)
timeout 20 "$SERVE" --db "$tmp/db1" --listen "$ADDR" --metrics "" >"$tmp/serve1.log" 2>&1
rc=$?
[ "$rc" != 0 ] && [ "$rc" != 124 ] || fail "plumb-serve on a store missing $victim: exit $rc"
grep -q "${victim%.sst}" "$tmp/serve1.log" || fail "plumb-serve did not name $victim"
grep -q "plumb repair" "$tmp/serve1.log" || fail "plumb-serve did not point at plumb repair"
echo "missing $victim: plumb-serve refused to start, naming it"
"$PLUMB" inspect --db "$tmp/db1" >"$tmp/inspect1.log" 2>&1 && fail "plumb inspect exited 0"
grep -q "${victim%.sst}" "$tmp/inspect1.log" || fail "plumb inspect did not name $victim"
"$PLUMB" inspect --verify --db "$tmp/db1" >/dev/null 2>&1 && fail "plumb inspect --verify exited 0"
echo "missing $victim: plumb inspect and inspect --verify exit non-zero, naming it"

# ---- 2. plumb repair, then the store serves ---------------------------------------------
"$PLUMB" repair --db "$tmp/db1" >"$tmp/repair1.log" 2>&1 || fail "plumb repair: $(cat "$tmp/repair1.log")"
"$PLUMB" inspect --verify --db "$tmp/db1" >"$tmp/verify1.log" 2>&1 ||
  fail "inspect --verify after the repair: $(cat "$tmp/verify1.log")"
"$SERVE" --db "$tmp/db1" --listen "$ADDR" --metrics "" >"$tmp/serve1b.log" 2>&1 &
pids+=($!)
for _ in $(seq 100); do "$QUERY" health --server "$ADDR" >/dev/null 2>&1 && break; sleep 0.2; done
"$QUERY" recommend --server "$ADDR" --user "$user" --count 3 >/dev/null 2>&1 ||
  fail "plumb-serve does not answer after the repair"
echo "after plumb repair: inspect --verify is clean and plumb-serve answers"
kill -TERM "${pids[-1]}"; wait "${pids[-1]}" 2>/dev/null

# ---- 3. CURRENT and the log deleted -----------------------------------------------------
cp -r "$tmp/good" "$tmp/db2"
rm "$tmp/db2/CURRENT"; rm -f "$tmp/db2"/*.log
tables=$(ls "$tmp/db2"/*.sst | wc -l)
TADDR=127.0.0.1:$(free_port)
timeout 20 "$TRAIN" --db "$tmp/db2" --listen "$TADDR" --metrics "" --dim 8 >"$tmp/train2.log" 2>&1
rc=$?
[ "$rc" != 0 ] && [ "$rc" != 124 ] || fail "plumb-train on a store without CURRENT: exit $rc"
grep -q "no CURRENT file" "$tmp/train2.log" || fail "plumb-train did not say what is wrong"
[ "$(ls "$tmp/db2"/*.sst | wc -l)" = "$tables" ] || fail "table files were deleted"
echo "no CURRENT: plumb-train refused to start and deleted nothing ($tables table files kept)"
"$PLUMB" repair --db "$tmp/db2" >"$tmp/repair2.log" 2>&1 || fail "plumb repair: $(cat "$tmp/repair2.log")"
"$TRAIN" --db "$tmp/db2" --listen "$TADDR" --metrics "" --dim 8 >"$tmp/train2b.log" 2>&1 &
pids+=($!)
for _ in $(seq 100); do "$QUERY" status --trainer "$TADDR" >/dev/null 2>&1 && break; sleep 0.2; done
last=$("$QUERY" status --trainer "$TADDR" 2>/dev/null | awk '/^last sequence/ {print $3}')
[ "$last" = "$events" ] || fail "after the repair the log ends at '$last', expected $events"
echo "after plumb repair: plumb-train starts with all $events events"
echo "damaged store: all checks passed"
