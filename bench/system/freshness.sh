#!/usr/bin/env bash
# Freshness: how long from an event's acknowledgement until plumb-serve answers with a version
# that learned it. Each round publishes one event for a brand-new user through EventIngest,
# then polls Recommend for that user until it is no longer NOT_FOUND. The target is the
# publish interval plus 1 s; this prints every round and the p50 / p95.
# Usage: bench/system/freshness.sh BUILD_DIR [ROUNDS] [PUBLISH_EVERY_SECONDS]
set -u
BIN=$1; ROUNDS=${2:-20}; EVERY=${3:-1}
. "$(dirname "$0")/common.sh"
T=127.0.0.1:$(port); S=127.0.0.1:$(port)
"$PLUMB" synth --out "$tmp/w" --users 1000 --items 500 --interactions 20000 --seed 2 >/dev/null 2>&1
"$TRAIN" --db "$tmp/db" --listen "$T" --metrics "" --dim 32 --publish-interval "${EVERY}s" \
  --idle-replay-passes 0 >"$tmp/train.log" 2>&1 & pids+=($!)
sleep 1
"$LOAD" replay --events "$tmp/w/events.csv" --trainer "$T" --quiet >/dev/null 2>&1
"$SERVE" --db "$tmp/db" --listen "$S" --metrics "" --catchup-interval 100ms >"$tmp/serve.log" 2>&1 & pids+=($!)
wait_serving "$S" 100
results=()
for r in $(seq "$ROUNDS"); do
  printf 'user,item\nfresh%s,t%s\n' "$r" "$((r % 50))" > "$tmp/e.csv"
  start=$(date +%s.%N)
  "$LOAD" replay --events "$tmp/e.csv" --trainer "$T" --quiet >/dev/null 2>&1
  acked=$(date +%s.%N)
  give_up=$(( $(date +%s) + 30 ))
  until "$QUERY" recommend --server "$S" --user "fresh$r" --count 1 >/dev/null 2>&1; do
    [ "$(date +%s)" -lt "$give_up" ] || { echo "round $r: not served within 30 s (see $tmp/train.log)"; exit 1; }
    sleep 0.02
  done
  done_at=$(date +%s.%N)
  s=$($PY -c "print('%.3f' % ($done_at - $acked))")
  echo "round $r: ack in $($PY -c "print('%.3f' % ($acked - $start))") s, served $s s after ack"
  results+=("$s")
  sleep 0.$((RANDOM % 10))
done
printf '%s\n' "${results[@]}" | $PY -c "
import sys, math
v = sorted(float(x) for x in sys.stdin)
q = lambda p: v[min(len(v) - 1, math.ceil(p * len(v)) - 1)]
print('freshness over %d rounds, publish interval $EVERY s: p50 %.3f s, p95 %.3f s, max %.3f s (target: interval + 1 s = %.1f s)' % (len(v), q(0.5), q(0.95), v[-1], $EVERY + 1))"
