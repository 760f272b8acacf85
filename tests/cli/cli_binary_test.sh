#!/usr/bin/env bash
# The `plumb` binary as a user meets it: --help on every command, errors as one line with a
# non-zero exit status.
set -u
PLUMB=$1
fail=0
check() { if ! eval "$2"; then echo "FAIL: $1"; fail=1; else echo "ok: $1"; fi; }

check "top-level --help lists the commands" \
  '"$PLUMB" --help | grep -q "synth" && "$PLUMB" --help | grep -q "compare"'
for cmd in synth import split fit tune eval compare versions activate pin unpin inspect repair forget export top; do
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

# ---- plumb split, worked by hand: a has pairs x, y, z (by ts), b has x, y. --holdout-fraction
# 0.34 holds out round(0.34 * 3) = 1 of a's (z, the latest) and round(0.68) = 1 of b's (y).
printf 'user,item,ts\na,y,1700000002000\nb,x,1700000001000\na,x,1700000001000\na,z,1700000003000\nb,y,1700000005000\na,x,1700000009000\n' > "$tmp/hist.csv"
out=$("$PLUMB" split --events "$tmp/hist.csv" --out "$tmp/split" --kind temporal --holdout-fraction 0.34 2>&1); rc=$?
check "split temporal: exit 0" '[ $rc -eq 0 ]'
check "split temporal: test.csv holds each user's latest pair" \
  '[ "$(cat "$tmp/split/test.csv")" = "$(printf "user,item,ts\na,z,1700000003000\nb,y,1700000005000")" ]'
check "split temporal: train.csv keeps every other event, both of (a, x)" \
  '[ "$(cat "$tmp/split/train.csv")" = "$(printf "user,item,ts\na,y,1700000002000\nb,x,1700000001000\na,x,1700000001000\na,x,1700000009000")" ]'
check "split: no validation.csv without --validation-fraction" '[ ! -e "$tmp/split/validation.csv" ]'
printf 'user,item\na,x\nb,y\n' > "$tmp/nots.csv"
out=$("$PLUMB" split --events "$tmp/nots.csv" --out "$tmp/split2" --kind temporal 2>&1); rc=$?
check "split temporal without ts: exit 1, says why" '[ $rc -eq 1 ] && printf "%s" "$out" | grep -q "needs a ts on every event"'
out=$("$PLUMB" split --events "$tmp/hist.csv" --out "$tmp/split3" --kind sideways 2>&1); rc=$?
check "split: an unknown kind is a usage error" '[ $rc -eq 2 ]'
cp "$tmp/hist.csv" "$tmp/split/train.csv"
out=$("$PLUMB" split --events "$tmp/split/train.csv" --out "$tmp/split" 2>&1); rc=$?
check "split never writes over its input" '[ $rc -eq 1 ] && printf "%s" "$out" | grep -q "would overwrite the input"'
# On a synthetic world: seeded, and a fit on train.csv evaluates on test.csv without warnings.
for seed in 4 4 5; do
  "$PLUMB" split --events "$tmp/w/events.csv" --out "$tmp/rs$seed-$RANDOM" --kind debiased \
    --holdout-fraction 0.3 --validation-fraction 0.5 --seed $seed >/dev/null 2>&1
done
same=("$tmp"/rs4-*)
s1=${same[0]}; s2=${same[1]}
check "split: the same seed gives the same files" 'cmp -s "$s1/test.csv" "$s2/test.csv" && cmp -s "$s1/train.csv" "$s2/train.csv" && cmp -s "$s1/validation.csv" "$s2/validation.csv"'
check "split: another seed gives another split" '! cmp -s "$s1/test.csv" "$tmp"/rs5-*/test.csv'
check "split: no test pair is a training pair" '/usr/bin/python3 -c "
import csv, sys
d = sys.argv[1]
train = {(r[\"user\"], r[\"item\"]) for r in csv.DictReader(open(d + \"/train.csv\"))}
held = [(r[\"user\"], r[\"item\"]) for f in (\"test\", \"validation\") for r in csv.DictReader(open(d + \"/\" + f + \".csv\"))]
events = sum(1 for _ in csv.DictReader(open(sys.argv[2])))
assert held and not train & set(held), len(held)
assert sum(1 for _ in csv.DictReader(open(d + \"/train.csv\"))) + len(held) == events
" "$s1" "$tmp/w/events.csv"'
"$PLUMB" split --events "$tmp/w/events.csv" --out "$tmp/rsplit" --seed 2 >/dev/null 2>&1
"$PLUMB" fit --events "$tmp/rsplit/train.csv" --db "$tmp/splitfit" --dim 8 --epochs 1 >/dev/null 2>&1
out=$("$PLUMB" eval --db "$tmp/splitfit" --test "$tmp/rsplit/test.csv" --k 5 2>&1); rc=$?
check "eval on the held-out pairs: exit 0, no warning" '[ $rc -eq 0 ] && ! printf "%s" "$out" | grep -q "warning"'
out=$("$PLUMB" eval --db "$tmp/splitfit" --test "$tmp/rsplit/train.csv" --k 5 2>&1); rc=$?
check "eval on the training file: exit 0 with a warning that says so" \
  '[ $rc -eq 0 ] && printf "%s" "$out" | grep -q "Is the test file the training file?"'

# ---- eval of several versions, compare on one's own files, repeated imports
"$PLUMB" fit --db "$tmp/splitfit" --objective bpr --dim 8 --epochs 1 >/dev/null 2>&1
out=$("$PLUMB" eval --db "$tmp/splitfit" --test "$tmp/rsplit/test.csv" --k 5 --model-version 1,2 2>&1)
check "eval --model-version 1,2: two columns" 'printf "%s" "$out" | head -1 | grep -q "v1 cpr b=3 *v2 bpr"'
out=$("$PLUMB" eval --db "$tmp/splitfit" --test "$tmp/rsplit/test.csv" --k 5 --model-version 2 --model-version 1 2>&1)
check "eval --model-version repeated: columns in the order given" 'printf "%s" "$out" | head -1 | grep -q "v2 bpr *v1 cpr b=3"'
out=$("$PLUMB" compare --events "$tmp/rsplit/train.csv" --users 10 --test "$tmp/rsplit/test.csv" 2>&1); rc=$?
check "compare --events with a world option: usage error" '[ $rc -eq 2 ]'
out=$("$PLUMB" compare --events "$tmp/rsplit/train.csv" 2>&1); rc=$?
check "compare --events without --test: usage error" '[ $rc -eq 2 ]'
out=$("$PLUMB" tune --events "$tmp/rsplit/train.csv" --publish 2>&1); rc=$?
check "tune --publish without --db: usage error" '[ $rc -eq 2 ]'
"$PLUMB" import --events "$tmp/rsplit/train.csv" --db "$tmp/twice" >/dev/null 2>&1
out=$("$PLUMB" import --events "$tmp/rsplit/train.csv" --db "$tmp/twice" 2>&1); rc=$?
check "the same file imported twice without event ids: a warning" \
  '[ $rc -eq 0 ] && printf "%s" "$out" | grep -q "imported the same events before"'
exit $fail
