#!/usr/bin/env bash
# The `plumb` binary as a user meets it: --help on every command, errors as one line with a
# non-zero exit status.
set -u
PLUMB=$1
fail=0
check() { if ! eval "$2"; then echo "FAIL: $1"; fail=1; else echo "ok: $1"; fi; }

check "top-level --help lists the commands" \
  '"$PLUMB" --help | grep -q "synth" && "$PLUMB" --help | grep -q "compare"'
for cmd in synth import fit eval compare versions activate inspect repair forget export top; do
  check "$cmd --help" '"$PLUMB" $cmd --help >/dev/null'
done
check "fit --help shows defaults" '"$PLUMB" fit --help | grep -q "beta.*3"'

tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
out=$("$PLUMB" versions --db "$tmp/none" 2>&1); rc=$?
check "missing store: non-zero exit" '[ $rc -ne 0 ]'
check "missing store: one-line reason" '[ "$(printf "%s\n" "$out" | wc -l)" -eq 1 ] && printf "%s" "$out" | grep -q "no store at"'
printf 'user,item\nm1,t1\nm2,\n' > "$tmp/bad.csv"
out=$("$PLUMB" fit --events "$tmp/bad.csv" --db "$tmp/db" 2>&1); rc=$?
check "bad csv: non-zero exit" '[ $rc -ne 0 ]'
check "bad csv: names file and line" 'printf "%s" "$out" | grep -q "bad.csv:3: item is empty"'
out=$("$PLUMB" fit --db "$tmp/db2" --objective nope 2>&1); rc=$?
check "unknown objective refused" '[ $rc -ne 0 ]'
exit $fail
