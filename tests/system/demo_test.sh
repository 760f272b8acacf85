#!/usr/bin/env bash
# The README's run command as written, unattended: `bash deploy/demo.sh --once`. Asserts that
# it exits 0, that the trainer's active version advanced past the first one while events
# streamed in, that the served lists came back, and that the online CPR version's ARP@20 is
# below the offline BPR version's (the demo prints CPR's evaluation first, BPR's second).
# Usage: demo_test.sh SOURCE_DIR BUILD_DIR_FOR_THE_DEMO
set -u
SRC=$1; DEMO_BUILD=$2
out=$(mktemp); demo_dir=$(mktemp -d)
trap 'PLUMB_DEMO_DIR=$demo_dir bash "$SRC/deploy/demo.sh" --stop >/dev/null 2>&1; rm -rf "$out" "$demo_dir"' EXIT
cd "$SRC"
PLUMB_DEMO_DIR=$demo_dir BUILD_DIR=$DEMO_BUILD bash deploy/demo.sh --once >"$out" 2>&1
rc=$?
fail() { echo "FAIL: $*"; tail -80 "$out"; exit 1; }
[ $rc = 0 ] || fail "deploy/demo.sh --once exited $rc"
active=$(awk '/^active version:/ {print $3; exit}' "$out")
[ -n "$active" ] && [ "$active" -ge 2 ] || fail "active version did not advance (got '$active')"
lists=$(grep -c '^model version' "$out")
[ "$lists" -ge 3 ] || fail "expected 3 served lists, saw $lists"
arps=$(awk '/^ARP@20/ {print $2}' "$out" | paste -sd' ')
read -r cpr bpr <<<"$arps"
[ -n "$cpr" ] && [ -n "$bpr" ] || fail "no ARP@20 figures in the output ($arps)"
echo "demo: active version $active; ARP@20 online CPR $cpr, offline BPR $bpr"
awk -v c="$cpr" -v b="$bpr" 'BEGIN {exit !(c < b)}' || fail "CPR ARP@20 $cpr is not below BPR's $bpr"
grep -q '^plumb_exposure_popularity_lift_ratio' "$out" || fail "exposure gauges not shown"
echo "demo: all checks passed"
