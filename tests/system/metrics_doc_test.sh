#!/usr/bin/env bash
# docs/operators.md lists every metric each process exports, and nothing else: this test
# runs plumb-train and plumb-serve on loopback with traffic that makes every family appear
# (events, a version, ranking calls of each method, control calls, an undecodable message),
# scrapes both, and compares the metric names (the "# TYPE" lines starting with plumb_) with
# the backticked names in the first column of the tables under "### plumb-serve" and
# "### plumb-train". Both scrapes must also pass `promtool check metrics`, Prometheus' own
# linter of the naming conventions (units as suffixes, _total on counters, ...).
# Usage: metrics_doc_test.sh BIN_DIR SOURCE_DIR
set -u
BIN=$1; SRC=$2
PROMTOOL=$(command -v promtool) || { echo "FAIL: promtool not found (Debian package prometheus)"; exit 1; }
. "$(dirname "$0")/common.sh"

"$PLUMB" synth --out "$tmp/world" --users 300 --items 150 --interactions 5000 --seed 5 \
  >/dev/null 2>&1 || fail "synth"
TRAIN_ADDR=127.0.0.1:$(free_port); TRAIN_METRICS=127.0.0.1:$(free_port)
SERVE_ADDR=127.0.0.1:$(free_port); SERVE_METRICS=127.0.0.1:$(free_port)
"$TRAIN" --db "$tmp/db" --listen "$TRAIN_ADDR" --metrics "$TRAIN_METRICS" --no-sync --dim 8 \
  --publish-interval 1s --holdout-fraction 0.05 >"$tmp/train.log" 2>&1 &
pids="$pids $!"
for _ in $(seq 150); do grep -q "plumb-train serving" "$tmp/train.log" && break; sleep 0.2; done
"$LOAD" replay --events "$tmp/world/events.csv" --trainer "$TRAIN_ADDR" --quiet \
  >/dev/null 2>&1 || fail "replay"
"$SERVE" --db "$tmp/db" --listen "$SERVE_ADDR" --metrics "$SERVE_METRICS" \
  --catchup-interval 100ms >"$tmp/serve.log" 2>&1 &
pids="$pids $!"
for _ in $(seq 300); do "$QUERY" health --server "$SERVE_ADDR" >/dev/null 2>&1 && break; sleep 0.2; done
"$QUERY" health --server "$SERVE_ADDR" >/dev/null 2>&1 || fail "plumb-serve never became healthy"

awk -F, 'NR > 1 {print $1}' "$tmp/world/events.csv" | sort -u > "$tmp/users.txt"
"$LOAD" --server "$SERVE_ADDR" --users-file "$tmp/users.txt" --duration 1s --concurrency 2 \
  >/dev/null 2>&1 || fail "plumb-load"
"$QUERY" similar --server "$SERVE_ADDR" --item t1 >/dev/null 2>&1 || fail "similar"
user=$(head -1 "$tmp/users.txt")
"$QUERY" rank --server "$SERVE_ADDR" --user "$user" --candidates t1,t2 >/dev/null 2>&1 || fail "rank"
"$QUERY" versions --trainer "$TRAIN_ADDR" >/dev/null 2>&1 || fail "versions"
$PY "$SRC/tests/system/undecodable_messages.py" "$TRAIN_ADDR" "$SERVE_ADDR" >/dev/null \
  || fail "undecodable messages"

# A canary of an older kept version at 50 %, so that the per-arm gauges appear too.
older=$("$QUERY" versions --trainer "$TRAIN_ADDR" | awk '$1 ~ /^[0-9]+$/ {print $1}' | tail -1)
[ -n "$older" ] || fail "no kept version other than the active one"
"$QUERY" canary-start --trainer "$TRAIN_ADDR" --model-version "$older" --share 50 >/dev/null \
  || fail "canary-start"
for _ in $(seq 100); do
  curl -sf "http://$SERVE_METRICS/metrics" | grep -q '^plumb_canary_version' && break; sleep 0.2
done
"$LOAD" --server "$SERVE_ADDR" --users-file "$tmp/users.txt" --duration 1s --concurrency 2 \
  >/dev/null 2>&1 || fail "plumb-load during the canary"

curl -sf "http://$SERVE_METRICS/metrics" > "$tmp/serve.prom" || fail "scrape plumb-serve"
curl -sf "http://$TRAIN_METRICS/metrics" > "$tmp/train.prom" || fail "scrape plumb-train"
for p in serve train; do
  lint=$("$PROMTOOL" check metrics < "$tmp/$p.prom" 2>&1)
  [ -z "$lint" ] || fail "promtool check metrics on plumb-$p's scrape: $lint"
  echo "ok: plumb-$p's metrics pass promtool check metrics"
done

$PY - "$SRC/docs/operators.md" "$tmp/serve.prom" "$tmp/train.prom" <<'PY' || fail "metric list"
import re, sys
doc, scrapes = open(sys.argv[1]).read(), {"plumb-serve": sys.argv[2], "plumb-train": sys.argv[3]}
documented, section = {"plumb-serve": set(), "plumb-train": set()}, None
for line in doc.splitlines():
    if line.startswith("### "):
        section = line[4:].strip() if line[4:].strip() in documented else None
    elif line.startswith("## "):
        section = None
    elif section and line.startswith("|"):
        first = line.split("|")[1]
        documented[section] |= set(re.findall(r"`(plumb_[a-z0-9_]+)", first))
ok = True
for process, path in scrapes.items():
    served = set(re.findall(r"^# TYPE (plumb_[a-z0-9_]+) ", open(path).read(), re.M))
    for name in sorted(served - documented[process]):
        print("FAIL: %s exports %s, which docs/operators.md does not list" % (process, name))
        ok = False
    for name in sorted(documented[process] - served):
        print("FAIL: docs/operators.md lists %s for %s, which it does not export" % (name, process))
        ok = False
    print("%s: %d metrics exported, %d documented" % (process, len(served), len(documented[process])))
sys.exit(0 if ok else 1)
PY
echo "metric list: docs/operators.md matches both live scrapes"
