#!/usr/bin/env bash
# Soak: plumb-serve and plumb-train together under mixed load for a long run (default one
# hour), at rates a small deployment sees rather than at saturation:
#   - Recommend at --rate calls/s (open loop, default 200/s, exclude-seen, top-20),
#   - events to plumb-train at --publish-rate per second (default 500/s, unique event ids),
#   - the trainer publishing a version every minute, which plumb-serve loads and swaps in.
# Every minute it prints the resident memory (RSS) of both processes, the versions swapped in
# and the events acknowledged so far. At the end: call errors, publish errors, and events
# lost = acknowledged events that are not in the log after a clean stop (should be 0), plus
# each process's RSS at the first and last minute and at its peak (should be flat).
# Not part of CI. Usage: bench/system/soak.sh BUILD_DIR [MINUTES] [QUERIES_PER_S] [EVENTS_PER_S]
set -u
BIN=$1; MINUTES=${2:-60}; QPS=${3:-200}; EPS=${4:-500}
. "$(dirname "$0")/common.sh"
train_pid=; serve_pid=; load_pid=
cleanup() {
  for p in $load_pid $serve_pid $train_pid; do kill -TERM "$p" 2>/dev/null; done; sleep 1
  for p in $load_pid $serve_pid $train_pid; do kill -KILL "$p" 2>/dev/null; done
  if [ "${KEEP:-0}" = 1 ]; then echo "kept $tmp"; else rm -rf "$tmp"; fi
}
fail() { echo "FAIL: $*"; tail -5 "$tmp"/*.log; exit 1; }
rss_mb() { awk '/^VmRSS/ {printf "%.1f", $2 / 1024}' "/proc/$1/status" 2>/dev/null; }
metric() { curl -s "http://$1/metrics" | awk -v m="$2" '$1 == m {printf "%d", $2}'; }
S=127.0.0.1:$(port); SM=127.0.0.1:$(port); T=127.0.0.1:$(port); TM=127.0.0.1:$(port)

echo "== world: 50,000 users x 20,000 items, 1 M interactions; first version (BPR, 2 epochs, d = 32)"
"$PLUMB" synth --out "$tmp/w" --users 50000 --items 20000 --interactions 1000000 --seed 11 \
  >/dev/null || fail synth
"$PLUMB" fit --events "$tmp/w/events.csv" --db "$tmp/db" --objective bpr --epochs 2 --dim 32 \
  >"$tmp/fit.log" 2>&1 || fail fit
awk -F, 'NR>1 {print $1}' "$tmp/w/events.csv" | sort -u >"$tmp/users.txt"
initial=$("$PLUMB" inspect --db "$tmp/db" | awk '/^event log/ {print $3}')

"$TRAIN" --db "$tmp/db" --listen "$T" --metrics "$TM" --objective bpr --dim 32 \
  --publish-interval 60s --publish-every-events 1000000000 >"$tmp/train.log" 2>&1 &
train_pid=$!
"$SERVE" --db "$tmp/db" --listen "$S" --metrics "$SM" >"$tmp/serve.log" 2>&1 &
serve_pid=$!
wait_training "$T"
wait_serving "$S" || fail "plumb-serve not healthy"

seconds=$(( MINUTES * 60 ))
echo "== $MINUTES min: Recommend at $QPS/s, $EPS events/s, a version a minute"
"$LOAD" --server "$S" --users-file "$tmp/users.txt" --rate "$QPS" --duration "${seconds}s" \
  --warmup 0s --count 20 --publish-rate "$EPS" --publish-events-per-call 100 --event-ids \
  --trainer "$T" --items-file "$tmp/w/items.csv" --json \
  >"$tmp/load.json" 2>"$tmp/load.log" &
load_pid=$!
printf '%6s %14s %14s %8s %12s\n' minute serve_rss_mb train_rss_mb swaps acknowledged
echo "minute,serve_rss_mb,train_rss_mb,swaps,acknowledged" >"$tmp/rss.csv"
for m in $(seq 1 "$MINUTES"); do
  sleep 60
  kill -0 "$serve_pid" 2>/dev/null || fail "plumb-serve died"
  kill -0 "$train_pid" 2>/dev/null || fail "plumb-train died"
  line="$m,$(rss_mb $serve_pid),$(rss_mb $train_pid),$(metric "$SM" plumb_snapshot_swaps_total),$(metric "$TM" plumb_events_accepted_total)"
  echo "$line" >>"$tmp/rss.csv"
  echo "$line" | awk -F, '{printf "%6d %14s %14s %8s %12s\n", $1, $2, $3, $4, $5}'
done
wait "$load_pid" || fail "plumb-load failed"; load_pid=

# A clean stop, then count what the log holds.
kill -TERM "$train_pid"; wait "$train_pid" 2>/dev/null; train_pid=
final=$("$PLUMB" inspect --db "$tmp/db" | awk '/^event log/ {print $3}')
$PY - "$tmp/load.json" "$tmp/rss.csv" "$initial" "$final" <<'PYEOF'
import csv, json, sys
r = json.load(open(sys.argv[1]))
rows = list(csv.DictReader(open(sys.argv[2])))
initial, final = int(sys.argv[3]), int(sys.argv[4])
p = r["publish"]
acked, appended = p["acknowledged"], p["accepted"]  # acknowledged = appended + duplicates
grew = final - initial
lost = max(0, appended - grew)  # appended and acknowledged, but not in the log
print("== result")
print("  Recommend: %d calls, %d errors %s; p50 %.0f us, p99 %.0f us" % (
    r["requests"], r["errors"], r.get("errors_by_code", {}), r["latency_us"]["p50_us"],
    r["latency_us"]["p99_us"]))
print("  events: %d acknowledged (%d appended, %d duplicates), %d rejected, %d failed batches;"
      " the log grew by %d: %d lost" % (acked, appended, p["duplicates"], p["rejected"],
                                        p["errors"], grew, lost))
for who in ("serve", "train"):
    v = [float(x[who + "_rss_mb"]) for x in rows if x[who + "_rss_mb"]]
    if v:
        print("  plumb-%s RSS: minute 1 %.1f MB, last %.1f MB, peak %.1f MB" % (who, v[0], v[-1], max(v)))
print("  versions swapped in: %s" % rows[-1]["swaps"] if rows else "")
sys.exit(0 if r["errors"] == 0 and p["errors"] == 0 and lost == 0 else 1)
PYEOF
