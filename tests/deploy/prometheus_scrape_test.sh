#!/usr/bin/env bash
# Scrapes a running plumb-serve and plumb-train with a real Prometheus and checks, through
# Prometheus's HTTP API, that the exposure gauges and the ingest counter arrive with
# plausible values.
#
#   prometheus_scrape_test.sh SERVE_METRICS_ADDR TRAIN_METRICS_ADDR
#   e.g. prometheus_scrape_test.sh 127.0.0.1:9464 127.0.0.1:9465
#
# The configuration is deploy/prometheus/prometheus.yml with the two demo targets replaced
# by the given addresses and the intervals shortened to 1 s; deploy/prometheus/alerts.yml
# is loaded beside it, so the test also proves that a real Prometheus accepts and evaluates
# the alert rules. The server must have served some lists before this runs (an empty
# exposure window has no group shares to check).
#
# Environment:
#   PROMETHEUS              the prometheus binary (default: the one on PATH, Debian package
#                           "prometheus")
#   PYTHON3                 the python3 used for the checks (default: python3 on PATH;
#                           standard library only)
#   PLUMB_SCRAPE_TIMEOUT    seconds to wait for Prometheus, the targets and the first samples
#                           (default 60, at most 60)
#
# Exit status 0 when every check passes; 1 with a message on stderr otherwise. The
# Prometheus started here is always stopped and its temporary directory removed.
set -euo pipefail

if [ $# -ne 2 ]; then
  echo "usage: $0 SERVE_METRICS_ADDR TRAIN_METRICS_ADDR" >&2
  exit 2
fi
serve_addr=$1
train_addr=$2
for addr in "$serve_addr" "$train_addr"; do
  if ! [[ $addr =~ ^[^[:space:]/\"]+:[0-9]+$ ]]; then
    echo "prometheus_scrape_test: '$addr' is not a HOST:PORT address" >&2
    exit 2
  fi
done

here=$(cd "$(dirname "$0")" && pwd)
deploy_dir=$(cd "$here/../../deploy/prometheus" && pwd)

prometheus_bin=${PROMETHEUS:-$(command -v prometheus || true)}
if [ -z "$prometheus_bin" ] || [ ! -x "$prometheus_bin" ]; then
  echo "prometheus_scrape_test: no prometheus binary (install the Debian package" \
       "'prometheus', see deploy/install-deps.sh, or set PROMETHEUS)" >&2
  exit 1
fi

python=${PYTHON3:-python3}
timeout_s=${PLUMB_SCRAPE_TIMEOUT:-60}
if ! [[ $timeout_s =~ ^[0-9]+$ ]] || [ "$timeout_s" -lt 1 ] || [ "$timeout_s" -gt 60 ]; then
  echo "prometheus_scrape_test: PLUMB_SCRAPE_TIMEOUT must be 1..60 seconds" >&2
  exit 2
fi

work=$(mktemp -d "${TMPDIR:-/tmp}/plumb-scrape.XXXXXX")
prom_pid=""
checker_pid=""

stop_prometheus() {
  if [ -n "$prom_pid" ] && kill -0 "$prom_pid" 2>/dev/null; then
    kill -TERM "$prom_pid" 2>/dev/null || true
    # Prometheus shuts down cleanly on SIGTERM; give it 10 s, then stop it hard.
    for _ in $(seq 1 100); do
      kill -0 "$prom_pid" 2>/dev/null || break
      sleep 0.1
    done
    kill -KILL "$prom_pid" 2>/dev/null || true
    wait "$prom_pid" 2>/dev/null || true
  fi
  prom_pid=""
}
cleanup() {
  if [ -n "$checker_pid" ]; then
    kill -TERM "$checker_pid" 2>/dev/null || true
    wait "$checker_pid" 2>/dev/null || true
  fi
  stop_prometheus
  rm -rf "$work"
}
trap cleanup EXIT
trap 'exit 130' INT
trap 'exit 143' TERM

# The deploy configuration, retargeted. Each replacement must happen exactly once, so a
# change to prometheus.yml that this script no longer understands fails loudly.
"$python" - "$deploy_dir/prometheus.yml" "$work/prometheus.yml" "$serve_addr" "$train_addr" <<'PY'
import sys
src, dst, serve, train = sys.argv[1:5]
text = open(src, encoding="utf-8").read()
for old, new in (('"127.0.0.1:9464"', '"%s"' % serve), ('"127.0.0.1:9465"', '"%s"' % train),
                 ("scrape_interval: 15s", "scrape_interval: 1s"),
                 ("evaluation_interval: 15s", "evaluation_interval: 1s")):
    if text.count(old) != 1:
        sys.exit("prometheus_scrape_test: expected exactly one %r in %s" % (old, src))
    text = text.replace(old, new)
open(dst, "w", encoding="utf-8").write(text)
PY
cp "$deploy_dir/alerts.yml" "$work/alerts.yml"

free_port() {
  "$python" -c 'import socket; s=socket.socket(); s.bind(("127.0.0.1", 0)); print(s.getsockname()[1]); s.close()'
}

deadline=$(( $(date +%s) + timeout_s ))

# A port picked free can be taken before Prometheus binds it; try a few.
for attempt in 1 2 3; do
  port=$(free_port)
  rm -rf "$work/data"
  # `timeout` bounds Prometheus's life even if this script is killed without a chance to
  # run its trap (SIGKILL); it passes our SIGTERM on to Prometheus.
  timeout --kill-after=5 "$(( timeout_s + 30 ))" "$prometheus_bin" \
    --config.file="$work/prometheus.yml" \
    --storage.tsdb.path="$work/data" \
    --web.listen-address="127.0.0.1:$port" \
    >"$work/prometheus.log" 2>&1 &
  prom_pid=$!
  sleep 0.5
  if kill -0 "$prom_pid" 2>/dev/null; then break; fi
  wait "$prom_pid" 2>/dev/null || true
  prom_pid=""
  if ! grep -q "address already in use" "$work/prometheus.log"; then break; fi
done
if [ -z "$prom_pid" ]; then
  echo "prometheus_scrape_test: prometheus did not start; its log:" >&2
  tail -n 30 "$work/prometheus.log" >&2
  exit 1
fi
echo "prometheus_scrape_test: prometheus pid $prom_pid on 127.0.0.1:$port" \
     "scraping plumb-serve at $serve_addr and plumb-train at $train_addr"

# The checks run in the background so that a signal to this script is handled at once
# (bash runs traps only between foreground commands, but interrupts `wait`).
"$python" - "http://127.0.0.1:$port" "$prom_pid" "$deadline" <<'PY' &
import json, math, os, sys, time, urllib.error, urllib.parse, urllib.request

base, pid, deadline = sys.argv[1], int(sys.argv[2]), float(sys.argv[3])


def fail(message):
    print("prometheus_scrape_test: FAIL: " + message, file=sys.stderr)
    sys.exit(1)


def alive():
    try:
        os.kill(pid, 0)
        return True
    except OSError:
        return False


def get(path, params=None):
    url = base + path + ("?" + urllib.parse.urlencode(params) if params else "")
    with urllib.request.urlopen(url, timeout=5) as response:
        return response.status, response.read()


def api(path, params=None):
    status, body = get(path, params)
    doc = json.loads(body)
    if doc.get("status") != "success":
        fail("%s answered %s" % (path, body[:300]))
    return doc["data"]


def wait_for(what, probe):
    """Calls probe() every 0.25 s until it returns a true value or the deadline passes."""
    last = None
    while time.time() < deadline:
        if not alive():
            fail("prometheus exited while waiting for " + what)
        try:
            result = probe()
            if result:
                return result
        except (urllib.error.URLError, ConnectionError, TimeoutError) as error:
            last = error
        time.sleep(0.25)
    fail("timed out waiting for %s (last error: %s)" % (what, last))


# 1. Prometheus answers.
wait_for("prometheus to be ready", lambda: get("/-/ready")[0] == 200)

# 2. Both targets are up. Report the scrape error of any that is not.
last_targets = {}


def targets_up():
    active = api("/api/v1/targets", {"state": "active"})["activeTargets"]
    last_targets.clear()
    for target in active:
        last_targets[target["labels"].get("job")] = (target["health"], target.get("lastError", ""))
    return all(last_targets.get(job, ("", ""))[0] == "up" for job in ("plumb-serve", "plumb-train"))


try:
    wait_for("both targets to be up", targets_up)
except SystemExit:
    for job, (health, error) in sorted(last_targets.items()):
        print("  target %s: health %s, last error %r" % (job, health or "unknown", error),
              file=sys.stderr)
    raise

# 3. The alert rules from deploy/ are loaded and evaluate without error.
expected_alerts = {"PlumbServerDown", "PlumbTrainerDown", "PlumbServingErrors",
                   "PlumbModelStale", "PlumbTrainerLagging", "PlumbGateFailures",
                   "PlumbUnderCorrected", "PlumbOverCorrected", "PlumbPopularityDrift",
                   "PlumbExposureGiniHigh",
                   "PlumbServingOverloaded", "PlumbStoreDamaged"}


def rules_evaluated():
    rules = [rule for group in api("/api/v1/rules")["groups"] for rule in group["rules"]]
    bad = [(rule["name"], rule.get("lastError")) for rule in rules if rule["health"] == "err"]
    if bad:
        fail("alert rules fail to evaluate: %r" % bad)
    names = {rule["name"] for rule in rules if rule["type"] == "alerting"}
    if names != expected_alerts:
        fail("loaded alert rules %s, expected %s" % (sorted(names), sorted(expected_alerts)))
    return all(rule["health"] == "ok" for rule in rules)


wait_for("the alert rules to be evaluated", rules_evaluated)


# 4. The gauges and the counter, with plausible values.
def query(expr):
    """Instant vector for expr, waiting (within the deadline) until it is not empty."""
    def probe():
        data = api("/api/v1/query", {"query": expr})
        if data["resultType"] != "vector":
            fail("%s: result type %s, expected vector" % (expr, data["resultType"]))
        return data["result"]
    return wait_for("samples of " + expr, probe)


def number(sample, expr):
    value = float(sample["value"][1])
    if not math.isfinite(value):
        fail("%s%s = %r is not finite" % (expr, sample["metric"], sample["value"][1]))
    return value


for sample in query('plumb_exposure_gini_ratio{job="plumb-serve"}'):
    gini = number(sample, "plumb_exposure_gini_ratio")
    # The Gini coefficient of non-negative counts lies in [0, 1]: 0 for equal exposure,
    # near 1 when one item takes every slot (definition per Gini 1912, from memory).
    if not 0.0 <= gini <= 1.0:
        fail("plumb_exposure_gini_ratio = %r, outside [0, 1]" % gini)
    print("ok plumb_exposure_gini_ratio %r" % gini)

for sample in query('plumb_exposure_popularity_lift_ratio{job="plumb-serve"}'):
    lift = number(sample, "plumb_exposure_popularity_lift_ratio")
    # A ratio of two mean training degrees of served/interacted items: positive once
    # anything was served.
    if not lift > 0.0:
        fail("plumb_exposure_popularity_lift_ratio = %r, expected > 0" % lift)
    print("ok plumb_exposure_popularity_lift_ratio %r" % lift)

shares = {}
for sample in query('plumb_exposure_group_share_ratio{job="plumb-serve"}'):
    instance = sample["metric"].get("instance", "")
    group = sample["metric"].get("group")
    share = number(sample, "plumb_exposure_group_share_ratio")
    if group is None or not group.isdigit():
        fail("plumb_exposure_group_share_ratio has group label %r, expected 1..G" % group)
    if not 0.0 <= share <= 1.0:
        fail("plumb_exposure_group_share_ratio{group=%r} = %r, outside [0, 1]" % (group, share))
    shares.setdefault(instance, {})[int(group)] = share
for instance, by_group in shares.items():
    if sorted(by_group) != list(range(1, len(by_group) + 1)) or len(by_group) < 2:
        fail("plumb_exposure_group_share_ratio groups %s, expected 1..G with G >= 2"
             % sorted(by_group))
    total = math.fsum(by_group.values())
    # Shares of one set of served slots over a partition of the catalogue sum to 1.
    if abs(total - 1.0) > 1e-3:
        fail("plumb_exposure_group_share_ratio sums to %r over %d groups, expected 1"
             % (total, len(by_group)))
    for group in sorted(by_group):
        print("ok plumb_exposure_group_share_ratio{group=\"%d\"} %r" % (group, by_group[group]))

for sample in query('plumb_events_accepted_total{job="plumb-train"}'):
    accepted = number(sample, "plumb_events_accepted_total")
    if accepted < 0 or accepted != math.floor(accepted):
        fail("plumb_events_accepted_total = %r, expected a whole number >= 0" % accepted)
    print("ok plumb_events_accepted_total %r" % accepted)
PY
checker_pid=$!
status=0
wait "$checker_pid" || status=$?
checker_pid=""

if [ "$status" -ne 0 ]; then
  echo "prometheus_scrape_test: last lines of the prometheus log:" >&2
  tail -n 15 "$work/prometheus.log" >&2
  exit 1
fi
echo "prometheus_scrape_test: PASS"
