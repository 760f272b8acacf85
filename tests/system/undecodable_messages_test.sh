#!/usr/bin/env bash
# Undecodable messages against the real binaries: runs undecodable_messages.py (a Python
# gRPC client sending hand-encoded bytes) against plumb-train and plumb-serve on loopback,
# then checks that the failures were counted on both metrics endpoints.
# Usage: undecodable_messages_test.sh BIN_DIR SOURCE_DIR
set -u
BIN=$1; SRC=$2
. "$(dirname "$0")/common.sh"
metric() { curl -s "http://$1/metrics" | awk -v m="$2" '$1 == m {print $2}'; }

start_pair

$PY "$SRC/tests/system/undecodable_messages.py" "$TRAIN_ADDR" "$SERVE_ADDR" || fail "client checks"

check_metric() {  # ENDPOINT SAMPLE WANT
  local got; got=$(metric "$1" "$2")
  [ "${got%.*}" = "$3" ] || fail "$2 is '$got', want $3"
  echo "ok: $2 = $3"
}
check_metric "$TRAIN_METRICS" 'plumb_undecodable_messages_total{method="Publish"}' 1
check_metric "$TRAIN_METRICS" 'plumb_undecodable_messages_total{method="PublishBatch"}' 1
check_metric "$TRAIN_METRICS" 'plumb_undecodable_messages_total{method="GetStatus"}' 1
check_metric "$TRAIN_METRICS" 'plumb_requests_total{code="INVALID_ARGUMENT",method="Publish"}' 1
check_metric "$TRAIN_METRICS" 'plumb_requests_total{code="INVALID_ARGUMENT",method="PublishBatch"}' 1
check_metric "$SERVE_METRICS" 'plumb_requests_total{code="INVALID_ARGUMENT",method="Recommend"}' 1
check_metric "$SERVE_METRICS" 'plumb_requests_total{code="INVALID_ARGUMENT",method="RankCandidates"}' 1
echo "undecodable messages: all checks passed"
