#!/usr/bin/env bash
# The `plumb` binary as a user meets it: --help on every command, errors as one line with a
# non-zero exit status.
set -u
PLUMB=$1
fail=0
check() { if ! eval "$2"; then echo "FAIL: $1"; fail=1; else echo "ok: $1"; fi; }

check "top-level --help lists the commands" \
  '"$PLUMB" --help | grep -q "synth" && "$PLUMB" --help | grep -q "compare"'
for cmd in synth import fit eval compare versions activate pin unpin inspect repair forget export top; do
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
# Spreadsheets' "CSV UTF-8" starts with a byte-order mark: import, fit, eval and top --names
# take it as plain CSV.
"$PLUMB" synth --out "$tmp/w" --users 200 --items 80 --interactions 2000 --seed 3 >/dev/null 2>&1 \
  || { echo "FAIL: synth for the byte-order-mark checks"; fail=1; }
for f in events test items; do printf '\xEF\xBB\xBF' > "$tmp/w/bom_$f.csv"; cat "$tmp/w/$f.csv" >> "$tmp/w/bom_$f.csv"; done
check "import with a byte-order mark" '"$PLUMB" import --events "$tmp/w/bom_events.csv" --db "$tmp/bomdb" >/dev/null 2>&1'
check "fit with a byte-order mark" '"$PLUMB" fit --events "$tmp/w/bom_events.csv" --db "$tmp/bomfit" --dim 8 --epochs 1 >/dev/null 2>&1'
check "eval with a byte-order mark" '"$PLUMB" eval --db "$tmp/bomfit" --test "$tmp/w/bom_test.csv" --k 5 >/dev/null 2>&1'
user=$(awk -F, 'NR==2 {print $1}' "$tmp/w/events.csv")
check "top --names with a byte-order mark shows names" \
  '"$PLUMB" top --db "$tmp/bomfit" --user "$user" --count 3 --names "$tmp/w/bom_items.csv" | grep -q "#"'
out=$("$PLUMB" pin --db "$tmp/bomfit" --model-version 1 2>&1); rc=$?
check "pin: exit 0" '[ $rc -eq 0 ] && printf "%s" "$out" | grep -q "version 1 is pinned"'
check "versions marks the active pinned version '*p'" '"$PLUMB" versions --db "$tmp/bomfit" | grep -qE "^\*p +1 "'
check "unpin" '"$PLUMB" unpin --db "$tmp/bomfit" --model-version 1 >/dev/null && "$PLUMB" versions --db "$tmp/bomfit" | grep -qE "^\* +1 "'
out=$("$PLUMB" pin --db "$tmp/bomfit" --model-version 9 2>&1); rc=$?
check "pin of a version not kept: non-zero exit, says so" '[ $rc -ne 0 ] && printf "%s" "$out" | grep -q "version 9 is not stored"'
check "inspect says what the versions take" '"$PLUMB" inspect --db "$tmp/bomfit" | grep -q "MB before compression"'
# export: real TSV, as Python's csv module and numpy read it.
"$PLUMB" export --db "$tmp/bomfit" --out "$tmp/export" >/dev/null 2>&1
check "export: a TSV with a header that csv and numpy read back" \
  '/usr/bin/python3 -c "
import csv, sys, numpy
rows = list(csv.reader(open(sys.argv[1]), delimiter=\"\t\"))
assert rows[0] == [\"item\"] + [\"d%d\" % c for c in range(8)], rows[0]
assert len(rows) > 1 and all(len(r) == 9 for r in rows)
values = numpy.loadtxt(sys.argv[1], delimiter=\"\t\", skiprows=1, usecols=range(1, 9))
assert values.shape == (len(rows) - 1, 8) and numpy.isfinite(values).all()
" "$tmp/export/items.tsv"'
check "top says what the number is" '"$PLUMB" top --db "$tmp/bomfit" --user "$user" --count 2 | grep -q "users in training)"'
tr , '\t' < "$tmp/w/events.csv" > "$tmp/w/events.tsv"
out=$("$PLUMB" import --events "$tmp/w/events.tsv" --db "$tmp/tsvdb" 2>&1); rc=$?
check "tab-separated file: non-zero exit, told to use commas" '[ $rc -ne 0 ] && printf "%s" "$out" | grep -q "use commas"'
# A failed import changes nothing: no store directory is left behind.
out=$("$PLUMB" import --events "$tmp/bad.csv" --db "$tmp/never" 2>&1); rc=$?
check "failed import: non-zero exit and no store directory left" '[ $rc -ne 0 ] && [ ! -e "$tmp/never" ]'
out=$("$PLUMB" fit --events "$tmp/bad.csv" --db "$tmp/never2" 2>&1); rc=$?
check "failed fit import: no store directory left" '[ $rc -ne 0 ] && [ ! -e "$tmp/never2" ]'
# A directory of someone else's files is not turned into a store.
mkdir -p "$tmp/mine" && echo "notes" > "$tmp/mine/notes.txt"
out=$("$PLUMB" import --events "$tmp/w/events.csv" --db "$tmp/mine" 2>&1); rc=$?
check "import into a directory of other files: refused, directory untouched" \
  '[ $rc -ne 0 ] && printf "%s" "$out" | grep -q "holds other files and no plumb store" && [ "$(ls "$tmp/mine")" = notes.txt ]'
out=$("$PLUMB" activate --db "$tmp/nothing" --model-version 1 2>&1); rc=$?
check "activate on a missing store: refused, nothing created" '[ $rc -ne 0 ] && [ ! -e "$tmp/nothing" ]'
# ts in seconds: a warning on stderr, and the import still happens.
printf 'user,item,ts\nm1,t1,1700000000\nm2,t2,1700000100\n' > "$tmp/seconds.csv"
out=$("$PLUMB" import --events "$tmp/seconds.csv" --db "$tmp/secdb" 2>&1); rc=$?
check "ts in seconds: imported with a warning" '[ $rc -eq 0 ] && printf "%s" "$out" | grep -q "are they seconds?"'
out=$("$PLUMB" fit --db "$tmp/db2" --objective nope 2>&1); rc=$?
check "unknown objective refused" '[ $rc -ne 0 ]'
exit $fail
