#!/usr/bin/env bash
# Serving beside the trainer: plumb-serve's latency at a fixed arrival rate (open loop, so a
# slow server cannot hide behind a slower client) with and without a 10,000 events/s training
# stream into plumb-train on the same host, with the background threads of both daemons at
# normal priority (--background-nice 0) and at the default (10), alternated twice.
#   1. a synth world of 100,000 users x 110,000 tools (~100,000 reach the model), one BPR epoch
#      at d = 64 (the latency depends on the catalogue's size, not on quality);
#   2. per setting: plumb-serve; the empty-RPC floor (health) and Recommend (top 20, seen items
#      left out) at RATE calls/s; then plumb-train started on the same store (CPR, publishing a
#      version every 10 s, which plumb-serve loads and swaps in), the same Recommend load while
#      plumb-load publishes 10,000 events/s to it; the trainer's lag (events in the log not yet
#      trained on) sampled every second.
# Percentiles are nearest-rank (tools/latency_record.h). Clients and daemons share the cores.
#
# MODES (environment; default "nice0 nice10") picks the settings, each run twice, alternated:
#   nice0, nice10   both daemons' background work at that nice (10 is the default)
#   nopub           nice10, plumb-train publishing no version during the run
#   nosync          nice10, plumb-train acknowledging without fsync (--no-sync)
#   pinned          nice10, plumb-serve on core 0 and plumb-train on core 1 (taskset)
#   cpuhog, cpuhog2 no trainer: one / two busy shell loops at nice 10 instead
#   idlehog2        no trainer: two busy loops under SCHED_IDLE (chrt -i 0)
#   memhog          no trainer: one loop summing 256 MB with numpy, at nice 10
# The probes answer what sets the tail (README, "Serving beside the trainer").
# Usage: [MODES="..."] bench/system/quiet_neighbour.sh BUILD_DIR [SECONDS_PER_RUN] [RATE]
set -u
BIN=$1; SECS=${2:-20}; RATE=${3:-1000}; MODES=${MODES:-nice0 nice10}
. "$(dirname "$0")/common.sh"
S=127.0.0.1:$(port); T=127.0.0.1:$(port)

echo "== world: 100,000 users x 110,000 tools, ~1.2 M interactions; one-epoch BPR fit at d = 64"
"$PLUMB" synth --out "$tmp/w" --users 100000 --items 110000 --interactions 1200000 --seed 7 \
  >/dev/null || exit 1
"$PLUMB" fit --events "$tmp/w/events.csv" --db "$tmp/db" --objective bpr --epochs 1 --dim 64 \
  2>&1 | tail -1
cut -d, -f1 "$tmp/w/events.csv" | tail -n +2 | sort -u >"$tmp/users.txt"
cp -r "$tmp/db" "$tmp/db0"  # every setting starts from the same store

start_serve() {  # nice
  $SERVE_PIN "$SERVE" --db "$tmp/db" --listen "$S" --metrics "" --catchup-interval 500ms \
    --background-nice "$1" >>"$tmp/serve.log" 2>&1 &
  serve_pid=$!; pids+=($serve_pid)
  wait_serving "$S" && return 0
  echo "plumb-serve did not become healthy; log:"; cat "$tmp/serve.log"; exit 1
}
start_train() {  # nice
  $TRAIN_PIN "$TRAIN" --db "$tmp/db" --listen "$T" --metrics "" --dim 64 \
    --publish-interval "$PUBLISH_INTERVAL" --background-nice "$1" $TRAIN_FLAGS \
    >"$tmp/train.log" 2>&1 &
  train_pid=$!; pids+=($train_pid)
  wait_training "$T" 150 && return 0
  echo "plumb-train did not start; log:"; cat "$tmp/train.log"; exit 1
}
stop() { kill "$1"; wait "$1" 2>/dev/null; }

run() {  # name, then plumb-load flags
  local name=$1; shift
  "$LOAD" --server "$S" --users-file "$tmp/users.txt" --duration "${SECS}s" --warmup 2s \
    --rate "$RATE" --json "$@" >"$tmp/$name.json" 2>"$tmp/$name.err" ||
    { echo "run $name failed:"; cat "$tmp/$name.err"; exit 1; }
}
lag_sampler() {  # writes the trainer's lag once a second to $tmp/$1.lag until killed
  while :; do
    "$QUERY" status --trainer "$T" 2>/dev/null | sed -n 's/.*(lag \([0-9]*\) events).*/\1/p' \
      >>"$tmp/$1.lag"
    sleep 1
  done
}

hog() {  # runs what replaces the trainer in the hog modes until killed
  case $1 in
    cpuhog | cpuhog2) nice -n 10 sh -c 'while :; do :; done' ;;
    idlehog2) chrt -i 0 sh -c 'while :; do :; done' ;;
    memhog) nice -n 10 $PY -c 'import numpy as np
a = np.ones(1 << 25)
while True: a.sum()' ;;
  esac
}

for round in 1 2; do
  for mode in $MODES; do
    nice=10; SERVE_PIN=; TRAIN_PIN=; PUBLISH_INTERVAL=10s; TRAIN_FLAGS=
    case $mode in
      nice0) nice=0 ;;
      nice10 | cpuhog | cpuhog2 | idlehog2 | memhog) ;;
      nopub) PUBLISH_INTERVAL=3600s ;;
      nosync) TRAIN_FLAGS=--no-sync ;;
      pinned) SERVE_PIN="taskset -c 0"; TRAIN_PIN="taskset -c 1" ;;
      *) echo "unknown mode $mode (see the header)"; exit 2 ;;
    esac
    tag="$mode-r$round"
    echo "== $mode, round $round, load average $(cut -d' ' -f1-3 /proc/loadavg)"
    rm -rf "$tmp/db"; cp -r "$tmp/db0" "$tmp/db"
    start_serve "$nice"
    run "floor-$tag" --rpc health
    run "quiet-$tag" --rpc recommend --count 20
    case $mode in
      *hog*)
        hogs=()
        for _ in $(seq "$([ "${mode%2}" = "$mode" ] && echo 1 || echo 2)"); do
          hog "$mode" & hogs+=($!)
        done
        : >"$tmp/$tag.lag"
        run "stream-$tag" --rpc recommend --count 20
        kill "${hogs[@]}"; wait "${hogs[@]}" 2>/dev/null ;;
      *)
        start_train "$nice"
        lag_sampler "$tag" & sampler=$!
        run "stream-$tag" --rpc recommend --count 20 --publish-rate 10000 \
          --publish-events-per-call 100 --trainer "$T" --items-file "$tmp/w/items.csv"
        kill $sampler; wait $sampler 2>/dev/null
        "$QUERY" status --trainer "$T" >"$tmp/$tag.status" 2>&1
        stop "$train_pid" ;;
    esac
    stop "$serve_pid"
  done
done

$PY - "$tmp" "$RATE" "$MODES" <<'EOF'
import json, os, sys
tmp, rate, modes = sys.argv[1], float(sys.argv[2]), sys.argv[3].split()
def load(name):
    r = json.load(open(os.path.join(tmp, name + ".json")))
    return r
print("\nopen loop at %.0f calls/s; latency in ms (nearest rank); lag = events in the trainer's "
      "log not yet trained on, sampled each second" % rate)
print("%-8s %-5s %-26s %9s %7s %7s %7s %6s %9s %9s" % ("mode", "round", "run", "calls/s",
      "p50", "p99", "p99.9", "errors", "lag max", "lag end"))
for mode in modes:
    for rnd in (1, 2):
        tag = "%s-r%d" % (mode, rnd)
        quiet_p99 = None
        for kind in ("floor", "quiet", "stream"):
            r = load("%s-%s" % (kind, tag)); l = r["latency_us"]
            lag = ""
            if kind == "stream":
                vals = [int(x) for x in open(os.path.join(tmp, tag + ".lag")).read().split()]
                lag = "%9d %9d" % (max(vals), vals[-1]) if vals else "%9s %9s" % ("-", "-")
                p = r.get("publish", {})
                if p:
                    lag += "  events acked %.0f/s" % p.get("acknowledged_per_second", 0)
                lag += "  p99 x%.2f of quiet" % (l["p99_us"] / quiet_p99)
            if kind == "quiet":
                quiet_p99 = l["p99_us"]
            label = {"floor": "health (floor)", "quiet": "Recommend, no stream",
                     "stream": ("Recommend, beside the hog" if "hog" in mode else
                                "Recommend, 10k events/s")}[kind]
            print("%-8s %-5d %-26s %9.0f %7.2f %7.2f %7.2f %6d %s" % (
                mode, rnd, label, r["requests_per_second"], l["p50_us"] / 1e3, l["p99_us"] / 1e3,
                l["p999_us"] / 1e3, r["errors"], lag))
EOF
