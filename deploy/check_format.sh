#!/usr/bin/env bash
# Checks that every C++ line changed since a base commit is formatted as the root
# .clang-format asks (clang-format --dry-run --Werror, restricted to the changed lines with
# --lines). Lines nobody touched are not checked, so the tree need not be reformatted at once;
# each change brings the lines it touches into shape.
#
#   bash deploy/check_format.sh [BASE]
#
# BASE: a commit (default: PLUMB_FORMAT_BASE, else the commit that introduced this check).
# Checks committed changes and uncommitted ones to tracked files (git add a new file first). Exit 0: all formatted; 1: some line
# is not (clang-format's messages name file and line); 2: the base commit is missing (e.g. a
# shallow clone) or clang-format is not installed.
set -euo pipefail
cd "$(dirname "$0")/.."

# The last commit before the check existed; every C++ line changed after it is checked.
DEFAULT_BASE=264436552f59334a347682f3951c6f50ed3a5337
BASE=${1:-${PLUMB_FORMAT_BASE:-$DEFAULT_BASE}}

if ! command -v clang-format >/dev/null; then
  echo "check_format: clang-format is not installed (deploy/install-deps.sh installs it)" >&2
  exit 2
fi
if ! git rev-parse --quiet --verify "${BASE}^{commit}" >/dev/null; then
  echo "check_format: base commit $BASE is not in this clone (shallow clone?);" \
       "fetch more history or pass another base" >&2
  exit 2
fi

status=0
checked=0
# Files changed since BASE (committed or not), C++ sources only, that still exist.
while IFS= read -r file; do
  [ -f "$file" ] || continue
  # Changed line ranges on the new side: hunk headers "@@ -a,b +c,d @@" (d = 0: deletion only).
  ranges=()
  while IFS= read -r range; do
    ranges+=("--lines=$range")
  done < <(git diff -U0 --no-color "$BASE" -- "$file" |
           sed -n 's/^@@ -[0-9,]* +\([0-9]*\)\(,\([0-9]*\)\)\{0,1\} @@.*/\1 \3/p' |
           awk '{ n = ($2 == "") ? 1 : $2; if (n > 0) print $1 ":" $1 + n - 1 }')
  [ ${#ranges[@]} -eq 0 ] && continue
  checked=$((checked + 1))
  if ! clang-format --dry-run --Werror --style=file "${ranges[@]}" "$file"; then
    status=1
  fi
done < <(git diff --name-only --diff-filter=d "$BASE" -- '*.cc' '*.h' '*.cpp' '*.hpp')

if [ "$status" -ne 0 ]; then
  echo "check_format: changed lines above are not formatted; run" \
       "clang-format -i --lines=A:B on them (or git clang-format $BASE)" >&2
else
  echo "check_format: $checked changed file(s) since ${BASE:0:12} formatted"
fi
exit "$status"
