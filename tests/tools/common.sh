# Sourced by the tests/tools scripts: `check NAME CONDITION` (prints ok/FAIL, sets fail=1 on a
# failure), `json FILE EXPR` (a Python expression over the JSON file as d) and `wait_port LOG
# PATTERN PID` (the port a process logs after PATTERN, waiting up to 30 s while PID lives).
# shellcheck shell=bash
fail=0
check() { if eval "$2"; then echo "ok: $1"; else echo "FAIL: $1"; fail=1; fi; }
json() { "${PYTHON3:-python3}" -c "import json,sys; d=json.load(open(sys.argv[1])); print($2)" "$1"; }
wait_port() {
  local port=""
  for _ in $(seq 300); do
    port=$(sed -n "s/.*$2 \([0-9][0-9]*\).*/\1/p" "$1" | head -1)
    [ -n "$port" ] && break
    kill -0 "$3" 2>/dev/null || break
    sleep 0.1
  done
  echo "$port"
}
