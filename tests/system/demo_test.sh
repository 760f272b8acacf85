#!/usr/bin/env bash
# The README's run command exactly as written, in a fresh `git clone` of this repository:
#   cd <clone> && bash deploy/demo.sh --once
# with the default BUILD_DIR (so the clone has no build/ when it starts, as a newcomer's has
# not). Uncommitted changes of the source tree are carried into the clone first, so that a
# developer tests what they have; CI's tree has none. Only where the demo runs is moved out of
# the way of other demos on this machine (PLUMB_DEMO_DIR and the four loopback addresses,
# picked free at run time); the command line and the build are the README's.
#
# Asserts that it exits 0, that the trainer's active version advanced past the first one
# while events streamed in, that the served lists came back, and that the online CPR
# version's ARP@20 is below the offline BPR version's (the demo prints CPR's evaluation
# first, BPR's second).
# Usage: demo_test.sh SOURCE_DIR WORK_DIR   (WORK_DIR is emptied and holds the clone)
set -u
SRC=$1; WORK=$2
SKIP=77
if ! git -C "$SRC" rev-parse --git-dir >/dev/null 2>&1; then
  echo "SKIP: $SRC is not a git checkout; the test needs to clone it"
  exit $SKIP
fi
rm -rf "$WORK"
mkdir -p "$WORK"
CLONE=$WORK/plumb
out=$WORK/demo.out
demo_dir=$WORK/demo
fail() { echo "FAIL: $*"; [ -f "$out" ] && tail -80 "$out"; exit 1; }

git clone -q --no-hardlinks "$SRC" "$CLONE" || fail "git clone $SRC failed"
# Carry a developer's uncommitted work (tracked changes and new files) into the clone.
(cd "$SRC" && git diff HEAD --binary) > "$WORK/local.patch"
if [ -s "$WORK/local.patch" ]; then
  (cd "$CLONE" && git apply --binary "$WORK/local.patch") || fail "cannot apply local changes"
  echo "demo: carried uncommitted changes of $SRC into the clone"
fi
(cd "$SRC" && git ls-files -z --others --exclude-standard | tar cf - --null -T -) \
  | (cd "$CLONE" && tar xf -) || fail "cannot copy new files into the clone"
[ ! -e "$CLONE/build" ] || fail "the fresh clone already has build/"

free_port() {
  /usr/bin/python3 -c 'import socket; s=socket.socket(); s.bind(("127.0.0.1", 0)); print(s.getsockname()[1])'
}
export PLUMB_DEMO_DIR=$demo_dir
export PLUMB_DEMO_SERVE=127.0.0.1:$(free_port)
export PLUMB_DEMO_SERVE_METRICS=127.0.0.1:$(free_port)
export PLUMB_DEMO_TRAIN=127.0.0.1:$(free_port)
export PLUMB_DEMO_TRAIN_METRICS=127.0.0.1:$(free_port)
unset BUILD_DIR
trap '(cd "$CLONE" && bash deploy/demo.sh --stop >/dev/null 2>&1)' EXIT

started=$(date +%s)
(cd "$CLONE" && bash deploy/demo.sh --once) >"$out" 2>&1
rc=$?
echo "demo: deploy/demo.sh --once took $(( $(date +%s) - started )) s in the fresh clone"
[ $rc = 0 ] || fail "deploy/demo.sh --once exited $rc"
[ -x "$CLONE/build/release/server/plumb-serve" ] || fail "no build/release in the clone"
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
trap - EXIT
rm -rf "$WORK"
