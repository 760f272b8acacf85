#!/usr/bin/env bash
# One port, one process: with plumb-train and plumb-serve running on loopback, a second
# plumb-train or plumb-serve on any of their four addresses (gRPC or metrics) must exit at
# start, non-zero, saying "address in use", and must not create its store. The first pair
# keeps answering. (gRPC turns SO_REUSEPORT on by default; before plumb turned it off, a
# second process started and took a share of the calls.)
# Usage: address_in_use_test.sh BIN_DIR
set -u
BIN=$1
. "$(dirname "$0")/common.sh"

start_pair

# Runs a second process (NAME LOG ARGS...), which must exit non-zero within 20 s with
# "address in use" in its log.
expect_refused() {
  local name=$1 log=$tmp/$2; shift 2
  timeout 20 "$@" >"$log" 2>&1
  local rc=$?
  [ $rc = 124 ] && fail "$name kept running (exit by timeout): $*"
  [ $rc != 0 ] || fail "$name exited 0: $*"
  grep -q "address in use" "$log" || fail "$name's log does not say 'address in use': $(tail -3 "$log")"
  echo "refused, exit $rc: $name $(grep -o 'address in use.*' "$log" | head -1 | cut -c1-90)"
}
expect_refused "second plumb-train, same gRPC port" train2.log \
  "$TRAIN" --db "$tmp/db2" --listen "$TRAIN_ADDR" --metrics "" --no-sync
[ ! -e "$tmp/db2" ] || fail "the refused plumb-train created its store at $tmp/db2"
expect_refused "second plumb-train, same metrics port" train3.log \
  "$TRAIN" --db "$tmp/db3" --listen "127.0.0.1:$(free_port)" --metrics "$TRAIN_METRICS" --no-sync
[ ! -e "$tmp/db3" ] || fail "the refused plumb-train created its store at $tmp/db3"
expect_refused "second plumb-serve, same gRPC port" serve2.log \
  "$SERVE" --db "$tmp/db" --listen "$SERVE_ADDR" --metrics ""
expect_refused "second plumb-serve, same metrics port" serve3.log \
  "$SERVE" --db "$tmp/db" --listen "127.0.0.1:$(free_port)" --metrics "$SERVE_METRICS"
expect_refused "plumb-serve on the trainer's port" serve4.log \
  "$SERVE" --db "$tmp/db" --listen "$TRAIN_ADDR" --metrics ""

# The first pair still answers, each on its own port, all calls to the same processes.
for _ in 1 2 3 4 5; do
  "$QUERY" status --trainer "$TRAIN_ADDR" >"$tmp/status.out" 2>&1 || fail "trainer status failed"
done
curl -sf "http://$TRAIN_METRICS/metrics" | grep -q '^plumb_' || fail "trainer metrics gone"
curl -sf "http://$SERVE_METRICS/metrics" | grep -q '^plumb_' || fail "server metrics gone"
echo "address in use: all checks passed"
