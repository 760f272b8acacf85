#!/usr/bin/env bash
# plumb-load replay and plumb-query's model-control commands against a real plumb-train on
# loopback with a bearer token; then plumb-load querying a plumb-serve that follows the same
# store while it publishes events to the trainer. Everything started here is stopped on exit.
set -u
PLUMB=$1 TRAIN=$2 SERVE=$3 LOAD=$4 QUERY=$5
tmp=$(mktemp -d)
pids=()
cleanup() {
  for p in "${pids[@]}"; do kill "$p" 2>/dev/null; done
  for p in "${pids[@]}"; do wait "$p" 2>/dev/null; done
  rm -rf "$tmp"
}
trap cleanup EXIT
. "$(dirname "$0")/common.sh"

"$PLUMB" synth --users 300 --items 150 --interactions 5000 --out "$tmp/world" >/dev/null || exit 1
events=$(($(wc -l <"$tmp/world/events.csv") - 1))
umask 077
echo "tool-shed-key-42" >"$tmp/token"
"$TRAIN" --db "$tmp/db" --listen 127.0.0.1:0 --metrics "" --token-file "$tmp/token" --dim 16 \
  --publish-every-events 2000 --publish-interval 1s --no-sync 2>"$tmp/train.log" &
pids+=($!)
port=$(wait_port "$tmp/train.log" "(port" "${pids[0]}")
if [ -z "$port" ]; then echo "FAIL: plumb-train did not start"; cat "$tmp/train.log"; exit 1; fi
train=127.0.0.1:$port
echo "plumb-train on $train"

# ---- replay ------------------------------------------------------------------------------------------
out=$("$LOAD" replay --events "$tmp/world/events.csv" --trainer "$train" 2>&1); rc=$?
check "replay without the token: exit 1, UNAUTHENTICATED, nothing sent [$out]" \
  '[ $rc -eq 1 ] && printf "%s" "$out" | grep -q "UNAUTHENTICATED" && printf "%s" "$out" | grep -q "0 events before it are acknowledged"'

"$LOAD" replay --events "$tmp/world/events.csv" --trainer "$train" --token-file "$tmp/token" \
  --events-per-call 1000 >"$tmp/replay.txt" 2>"$tmp/replay.err"
rc=$?
cat "$tmp/replay.txt"
check "replay exits 0" '[ $rc -eq 0 ]'
check "replay: all $events events accepted, none duplicate or rejected" \
  'grep -q "replayed $events events .*: $events accepted, 0 duplicates, 0 rejected" "$tmp/replay.txt"'
check "replay: the trainer's log ends at sequence $events" 'grep -q "log at sequence $events;" "$tmp/replay.txt"'
check "replay: throughput printed" 'grep -qE "\([0-9]+ events/s\)" "$tmp/replay.txt"'
check "replay: progress on stderr" 'grep -q "replay: $events/$events events (100.0%)" "$tmp/replay.err"'

# The same file again, streamed: the generated event ids make every event a duplicate.
"$LOAD" replay --events "$tmp/world/events.csv" --trainer "$train" --token-file "$tmp/token" \
  --stream --events-per-call 2500 --quiet >"$tmp/again.txt" 2>&1
rc=$?
streams=$(((events + 2499) / 2500))
check "streamed resend of the same file: all duplicates in $streams streams, log unchanged" \
  '[ $rc -eq 0 ] && grep -q ": 0 accepted, $events duplicates, 0 rejected; $streams calls" "$tmp/again.txt" && grep -q "log at sequence $events;" "$tmp/again.txt"'

printf 'user,item\nm1,t1\nm2\n' >"$tmp/broken.csv"
out=$("$LOAD" replay --events "$tmp/broken.csv" --trainer "$train" --token-file "$tmp/token" 2>&1); rc=$?
check "malformed file: exit 1 naming the line" '[ $rc -eq 1 ] && printf "%s" "$out" | grep -q "broken.csv:3"'

# ---- model control -------------------------------------------------------------------------------------
active=""
for _ in $(seq 300); do  # the trainer publishes within seconds; wait up to 30 s
  active=$("$QUERY" status --trainer "$train" --token-file "$tmp/token" 2>/dev/null |
           sed -n 's/^active version: *\([1-9][0-9]*\).*/\1/p')
  [ -n "$active" ] && break
  sleep 0.1
done
check "status shows an active version after the replay" '[ -n "$active" ]'
# From here on the trainer keeps publishing candidates but activates none, so the active
# version only changes when this script says so.
out=$("$QUERY" auto-activate off --trainer "$train" --token-file "$tmp/token" 2>&1); rc=$?
check "auto-activate off" '[ $rc -eq 0 ] && printf "%s" "$out" | grep -q "^auto-activate: *off"'
# A publish that began before the switch may still activate its candidate (the trainer
# reads the setting when a publish starts): wait until two reads half a second apart agree.
previous=""
for _ in $(seq 60); do
  "$QUERY" status --trainer "$train" --token-file "$tmp/token" >"$tmp/status.txt" 2>&1
  active=$(sed -n 's/^active version: *\([0-9]*\).*/\1/p' "$tmp/status.txt")
  [ -n "$active" ] && [ "$active" = "$previous" ] && break
  previous=$active
  sleep 0.5
done
cat "$tmp/status.txt"
check "status: last sequence $events" 'grep -q "^last sequence: *$events$" "$tmp/status.txt"'
check "status: objective and sizes" 'grep -q "^objective: *cpr" "$tmp/status.txt" && grep -q "^users: *[1-9]" "$tmp/status.txt"'
check "status: auto-activate off" 'grep -q "^auto-activate: *off" "$tmp/status.txt"'
"$QUERY" versions --trainer "$train" --token-file "$tmp/token" >"$tmp/versions.txt" 2>&1; rc=$?
cat "$tmp/versions.txt"
check "versions: exit 0, exactly the active version $active starred" \
  '[ $rc -eq 0 ] && [ "$(grep -c "^\*" "$tmp/versions.txt")" = 1 ] && grep -qE "^\* +${active:-x} .* cpr " "$tmp/versions.txt"'
out=$("$QUERY" versions --trainer "$train" 2>&1); rc=$?
check "versions without the token: UNAUTHENTICATED, exit 1" \
  '[ $rc -eq 1 ] && printf "%s" "$out" | grep -q "^plumb-query: UNAUTHENTICATED"'
out=$("$QUERY" activate --trainer "$train" --token-file "$tmp/token" --model-version 987654 2>&1); rc=$?
check "activate of a version not kept: NOT_FOUND, exit 1 [$out]" \
  '[ $rc -eq 1 ] && printf "%s" "$out" | grep -q "^plumb-query: NOT_FOUND"'
out=$("$QUERY" activate --trainer "$train" --token-file "$tmp/token" --model-version "$active" 2>&1); rc=$?
check "activate the active version again [$out]" '[ $rc -eq 0 ] && printf "%s" "$out" | grep -q "^active version $active (was $active)"'
# Canary commands: refusals first, then start, widen, abort; status shows each step.
older=$(awk '$1 ~ /^[0-9]+$/ {print $1}' "$tmp/versions.txt" | tail -1)
out=$("$QUERY" canary-abort --trainer "$train" --token-file "$tmp/token" 2>&1); rc=$?
check "canary-abort with none running: FAILED_PRECONDITION, exit 1 [$out]" \
  '[ $rc -eq 1 ] && printf "%s" "$out" | grep -q "^plumb-query: FAILED_PRECONDITION.*no canary"'
out=$("$QUERY" canary-widen --trainer "$train" --token-file "$tmp/token" --share 10 2>&1); rc=$?
check "canary-widen with none running: exit 1, says how to start one [$out]" \
  '[ $rc -eq 1 ] && printf "%s" "$out" | grep -q "canary-start"'
out=$("$QUERY" canary-start --trainer "$train" --token-file "$tmp/token" --model-version 1 --share 0 2>&1); rc=$?
check "canary-start --share 0: usage error, exit 2" '[ $rc -eq 2 ]'
out=$("$QUERY" canary-start --trainer "$train" --token-file "$tmp/token" --model-version "$active" --share 5 2>&1); rc=$?
check "canary of the active version: FAILED_PRECONDITION, exit 1 [$out]" \
  '[ $rc -eq 1 ] && printf "%s" "$out" | grep -q "^plumb-query: FAILED_PRECONDITION"'
if [ -n "$older" ]; then
  out=$("$QUERY" canary-start --trainer "$train" --token-file "$tmp/token" --model-version "$older" --share 5 2>&1); rc=$?
  check "canary-start of version $older at 5 % [$out]" \
    '[ $rc -eq 0 ] && printf "%s" "$out" | grep -q "^canary: version $older serves 5 % of the subjects, version $active the rest"'
  out=$("$QUERY" canary-widen --trainer "$train" --token-file "$tmp/token" --share 30 2>&1); rc=$?
  check "canary-widen to 30 % [$out]" '[ $rc -eq 0 ] && printf "%s" "$out" | grep -q "serves 30 %"'
  out=$("$QUERY" status --trainer "$train" --token-file "$tmp/token" 2>&1)
  check "status shows the canary" 'printf "%s" "$out" | grep -q "^canary: *version $older serves 30 % of the subjects since"'
  out=$("$QUERY" canary-abort --trainer "$train" --token-file "$tmp/token" 2>&1); rc=$?
  check "canary-abort [$out]" '[ $rc -eq 0 ] && printf "%s" "$out" | grep -q "^canary aborted: version $active serves everyone"'
else
  check "a kept version other than the active one for the canary commands" 'false'
fi
out=$("$QUERY" recommend --server "$train" --user m1 2>&1); rc=$?
check "recommend against plumb-train: exit 1, names plumb-serve [$out]" \
  '[ $rc -eq 1 ] && printf "%s" "$out" | grep -q "UNIMPLEMENTED.*answered by plumb-serve"'
out=$("$QUERY" auto-activate maybe --trainer "$train" --token-file "$tmp/token" 2>&1); rc=$?
check "auto-activate maybe: usage error, exit 2" '[ $rc -eq 2 ]'
out=$("$QUERY" auto-activate on --trainer "$train" --token-file "$tmp/token" 2>&1); rc=$?
check "auto-activate on" '[ $rc -eq 0 ] && printf "%s" "$out" | grep -q "^auto-activate: *on"'
check "versions say how they were trained" 'grep -qE "^ +trained: cpr k=2 beta=[0-9.]+ .*dim=" "$tmp/versions.txt"'
check "status shows the training configuration and refits" \
  'grep -qE "^training: *cpr k=2 beta=[0-9.]+" "$tmp/status.txt" && grep -qE "^refits: *[0-9]+ done" "$tmp/status.txt"'
out=$("$QUERY" retrain --trainer "$train" --token-file "$tmp/token" --reason "tools test" 2>&1); rc=$?
check "retrain: exit 0 and says what it does [$out]" \
  '[ $rc -eq 0 ] && printf "%s" "$out" | grep -q "rebuild from the whole event log requested"'

# ---- serving while events stream in ---------------------------------------------------------------------
"$SERVE" --db "$tmp/db" --listen 127.0.0.1:0 --metrics "" 2>"$tmp/serve.log" &
pids+=($!)
sport=$(wait_port "$tmp/serve.log" "listening on port" "${pids[1]}")
if [ -z "$sport" ]; then echo "FAIL: plumb-serve did not start"; cat "$tmp/serve.log"; exit 1; fi
"$LOAD" --server "127.0.0.1:$sport" --db "$tmp/db" --duration 2s --warmup 0.5s --concurrency 4 \
  --publish-rate 2000 --trainer "$train" --trainer-token-file "$tmp/token" --event-ids \
  --json >"$tmp/mixed.json" 2>"$tmp/mixed.txt"
rc=$?
cat "$tmp/mixed.txt"
check "load with publishing exits 0" '[ $rc -eq 0 ]'
check "load with publishing: queries OK, zero errors" \
  '[ "$(json "$tmp/mixed.json" "d[\"requests\"] > 0 and d[\"errors\"] == 0")" = True ]'
check "published events acknowledged, zero errors" \
  '[ "$(json "$tmp/mixed.json" "(lambda p: p[\"acknowledged\"] > 0 and p[\"acknowledged\"] == p[\"accepted\"] == p[\"events_sent\"] and p[\"errors\"] == 0)(d[\"publish\"])")" = True ]'
acked=$(json "$tmp/mixed.json" 'd["publish"]["accepted"]')
last=$("$QUERY" status --trainer "$train" --token-file "$tmp/token" | sed -n 's/^last sequence: *\([0-9]*\).*/\1/p')
check "the trainer's log grew by exactly the acknowledged events ($events + $acked = $last)" \
  '[ "$last" = "$((events + acked))" ]'
# ---- item availability: withdraw, served nowhere, restore --------------------------------------------
user=$(sed -n '2s/,.*//p' "$tmp/world/events.csv")
top_item() { "$QUERY" recommend --server "127.0.0.1:$sport" --user "$user" --count 10 2>/dev/null |
             awk '$1 == "1" {print $2; exit}'; }
target=$(top_item)
check "recommend for $user names a first item ($target)" '[ -n "$target" ]'
other=$("$QUERY" similar --server "127.0.0.1:$sport" --item "$target" --count 1 2>/dev/null |
        awk '$1 == "1" {print $2; exit}')
printf '# withdrawn by the tools test\n%s\n\n' "$target" >"$tmp/withdraw.txt"
out=$("$QUERY" items withdraw --trainer "$train" --token-file "$tmp/token" \
      --items-file "$tmp/withdraw.txt" 2>&1); rc=$?
check "items withdraw --items-file: exit 0, one item [$out]" \
  '[ $rc -eq 0 ] && printf "%s" "$out" | grep -q "^withdrew 1 items (0 already withdrawn); 1 items withdrawn in all"'
gone=""
for _ in $(seq 100); do  # plumb-serve follows the store every 500 ms by default
  ! "$QUERY" similar --server "127.0.0.1:$sport" --item "$other" --count 150 | grep -q " $target " &&
    gone=yes && break
  sleep 0.1
done
check "the withdrawn item left similar within 10 s" '[ -n "$gone" ]'
check "recommend never lists it" \
  '! "$QUERY" recommend --server "127.0.0.1:$sport" --user "$user" --count 150 | grep -q " $target "'
check "similar never lists it" \
  '! "$QUERY" similar --server "127.0.0.1:$sport" --item "$other" --count 150 | grep -q " $target "'
out=$("$QUERY" rank --server "127.0.0.1:$sport" --user "$user" --candidates "$target,$other" 2>&1)
check "rank reports it withdrawn, not ranked [$out]" \
  'printf "%s" "$out" | grep -q "^withdrawn from serving: $target$" && ! printf "%s" "$out" | grep -q "^ *[0-9]  *$target "'
out=$("$QUERY" items list --trainer "$train" --token-file "$tmp/token" --json 2>&1)
check "items list --json names it [$out]" \
  '[ "$(printf "%s" "$out" | "${PYTHON3:-python3}" -c "import json,sys; print([i[\"item\"] for i in json.load(sys.stdin)[\"withdrawn_items\"]])")" = "['"'"'$target'"'"']" ]'
check "status counts it" \
  '"$QUERY" status --trainer "$train" --token-file "$tmp/token" | grep -q "^withdrawn items: *1$"'
out=$("$QUERY" items withdraw --trainer "$train" --token-file "$tmp/token" 2>&1); rc=$?
check "items withdraw without ids: exit 1, says what is missing [$out]" \
  '[ $rc -eq 1 ] && printf "%s" "$out" | grep -q "give --item ID or --items-file FILE"'
out=$("$QUERY" items restore --trainer "$train" --token-file "$tmp/token" --item "$target" 2>&1); rc=$?
check "items restore --item [$out]" \
  '[ $rc -eq 0 ] && printf "%s" "$out" | grep -q "^restored 1 items (0 already available); 0 items withdrawn in all"'
back=""
for _ in $(seq 100); do
  "$QUERY" similar --server "127.0.0.1:$sport" --item "$other" --count 150 | grep -q " $target " &&
    back=yes && break
  sleep 0.1
done
check "the restored item is served again within 10 s" '[ -n "$back" ]'
# ---- event-log retention in a running trainer -------------------------------------------------------
# 200 events one minute apart, the newest 4 h ago; a 1 h age rule measured back from the
# newest event removes exactly those more than 60 min older than it: k < 139 (by hand).
base=$(( ($(date +%s) - 4 * 3600) * 1000 ))
{ echo "user,item,ts"; for k in $(seq 0 199); do echo "r$((k % 17)),s$((k % 23)),$((base + k * 60000))"; done; } >"$tmp/old.csv"
"$TRAIN" --db "$tmp/rdb" --listen 127.0.0.1:0 --metrics "" --dim 8 --no-sync --min-train-pairs 10 \
  --publish-interval 500ms --retention-max-age 1h --retention-interval 200ms 2>"$tmp/rtrain.log" &
pids+=($!)
rport=$(wait_port "$tmp/rtrain.log" "(port" "${pids[-1]}")
"$LOAD" replay --events "$tmp/old.csv" --trainer "127.0.0.1:$rport" --quiet >/dev/null 2>&1
removed=""
for _ in $(seq 150); do
  removed=$("$QUERY" status --trainer "127.0.0.1:$rport" 2>/dev/null | sed -n 's/^retention: *\([0-9]*\) events.*/\1/p')
  [ "$removed" = 139 ] && break
  sleep 0.2
done
check "the trainer's retention removed exactly the 139 events older than the cut [$removed]" '[ "$removed" = 139 ]'
out=$("$PLUMB" inspect --db "$tmp/rdb" 2>&1)
check "plumb inspect shows the log left, its oldest event and what retention removed [$out]" \
  'printf "%s" "$out" | grep -q "^event log *61 events" && printf "%s" "$out" | grep -q "^oldest event *.* (sequence 140)" && printf "%s" "$out" | grep -q "^retention *removed 139 events"'
exit $fail
