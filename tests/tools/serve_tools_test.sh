#!/usr/bin/env bash
# plumb-load and plumb-query against a real plumb-serve on loopback, serving a small store
# fitted by the plumb command line. Everything started here is stopped on exit.
set -u
PLUMB=$1 SERVE=$2 LOAD=$3 QUERY=$4
tmp=$(mktemp -d)
serve_pid=""
tls_pid=""
cleanup() {
  if [ -n "$serve_pid" ]; then kill "$serve_pid" 2>/dev/null; wait "$serve_pid" 2>/dev/null; fi
  if [ -n "$tls_pid" ]; then kill "$tls_pid" 2>/dev/null; wait "$tls_pid" 2>/dev/null; fi
  rm -rf "$tmp"
}
trap cleanup EXIT
. "$(dirname "$0")/common.sh"

# ---- a small store: 300 members, 150 tools --------------------------------------------------
"$PLUMB" synth --users 300 --items 150 --interactions 5000 --out "$tmp/world" >/dev/null || exit 1
"$PLUMB" fit --events "$tmp/world/events.csv" --db "$tmp/db" --epochs 2 --dim 16 >/dev/null || exit 1

"$SERVE" --db "$tmp/db" --listen 127.0.0.1:0 --metrics "" 2>"$tmp/serve.log" &
serve_pid=$!
port=$(wait_port "$tmp/serve.log" "listening on port" "$serve_pid")
if [ -z "$port" ]; then echo "FAIL: plumb-serve did not start"; cat "$tmp/serve.log"; exit 1; fi
target=127.0.0.1:$port
echo "plumb-serve on $target"

# ---- plumb-load: closed loop over the store's users -------------------------------------------
"$LOAD" --server "$target" --db "$tmp/db" --duration 2s --warmup 0.5s --concurrency 4 \
  --json >"$tmp/recommend.json" 2>"$tmp/recommend.txt"
rc=$?
cat "$tmp/recommend.txt"
check "load run exits 0" '[ $rc -eq 0 ]'
check "load: requests > 0" '[ "$(json "$tmp/recommend.json" "d[\"requests\"] > 0")" = True ]'
check "load: zero errors" '[ "$(json "$tmp/recommend.json" "d[\"errors\"]")" = 0 ]'
check "load: every request OK" \
  '[ "$(json "$tmp/recommend.json" "d[\"ok\"] == d[\"requests\"] == d[\"latency_us\"][\"count\"]")" = True ]'
check "load: p50 <= p90 <= p99 <= p99.9 <= max" \
  '[ "$(json "$tmp/recommend.json" "(lambda l: 0 < l[\"p50_us\"] <= l[\"p90_us\"] <= l[\"p99_us\"] <= l[\"p999_us\"] <= l[\"max_us\"])(d[\"latency_us\"])")" = True ]'
check "load: requests/s = requests / seconds" \
  '[ "$(json "$tmp/recommend.json" "abs(d[\"requests_per_second\"] - d[\"requests\"] / d[\"duration_seconds\"]) < 0.01")" = True ]'
# Without --json the same report comes as text.
"$LOAD" --server "$target" --db "$tmp/db" --duration 0.3s --warmup 0s >"$tmp/recommend.txt" 2>&1
check "load: text report labels the latency unit" 'grep -q "latency of OK calls, microseconds: .*p99.9" "$tmp/recommend.txt"'

# ---- the empty-RPC floor -----------------------------------------------------------------------
"$LOAD" --server "$target" --rpc health --duration 1s --warmup 0.2s --concurrency 4 \
  --json >"$tmp/health.json" 2>"$tmp/health.txt"
rc=$?
cat "$tmp/health.txt"
check "health load exits 0" '[ $rc -eq 0 ]'
check "health: requests > 0, zero errors" \
  '[ "$(json "$tmp/health.json" "d[\"requests\"] > 0 and d[\"errors\"] == 0")" = True ]'

# ---- open loop, SimilarItems: the schedule fixes the number of calls ----------------------------
"$LOAD" --server "$target" --rpc similar --db "$tmp/db" --rate 200 --duration 1s --warmup 0.2s \
  --json >"$tmp/similar.json" 2>/dev/null
check "open loop at 200/s for 1 s makes exactly 200 SimilarItems calls, all OK" \
  '[ "$(json "$tmp/similar.json" "d[\"requests\"] == d[\"ok\"] == 200 and d[\"mode\"] == \"open\"")" = True ]'

# ---- errors are counted by status code -----------------------------------------------------------
printf 'nobody-1\nnobody-2\n' >"$tmp/strangers.txt"
"$LOAD" --server "$target" --users-file "$tmp/strangers.txt" --duration 0.5s --warmup 0s \
  --concurrency 2 --json >"$tmp/strangers.json" 2>/dev/null
check "unknown users: every call is NOT_FOUND" \
  '[ "$(json "$tmp/strangers.json" "d[\"ok\"] == 0 and d[\"errors\"] > 0 and d[\"errors_by_code\"] == {\"NOT_FOUND\": d[\"errors\"]}")" = True ]'
out=$("$LOAD" --server "$target" --duration 1s 2>&1); rc=$?
check "recommend load without ids: exit 1 with a reason" \
  '[ $rc -eq 1 ] && printf "%s" "$out" | grep -q "give --users-file or --db"'

# ---- plumb-query recommend, checked against the offline ranking of `plumb top` ------------------
user=$(sed -n 2p "$tmp/world/events.csv" | cut -d, -f1)
"$QUERY" recommend --server "$target" --user "$user" --count 5 \
  --names "$tmp/world/items.csv" >"$tmp/rec.txt" 2>&1
rc=$?
cat "$tmp/rec.txt"
check "recommend exits 0" '[ $rc -eq 0 ]'
check "recommend names the model version" 'head -1 "$tmp/rec.txt" | grep -q "^model version [1-9][0-9]*, user $user, 5 items"'
check "recommend prints 5 ranked lines" '[ "$(grep -cE "^ +[1-5] +t[0-9]+ +-?[0-9]+\.[0-9]{6}  " "$tmp/rec.txt")" = 5 ]'
# Every printed name is the one items.csv gives that item.
names_ok=1
while read -r rank item score name; do
  expected=$(grep "^$item," "$tmp/world/items.csv" | cut -d, -f2-)
  [ "$name" = "$expected" ] || names_ok=0
done < <(grep -E "^ +[0-9]+ +t" "$tmp/rec.txt")
check "recommend shows each item's name from items.csv" '[ $names_ok -eq 1 ]'
"$PLUMB" top --db "$tmp/db" --user "$user" --count 5 >"$tmp/top.txt" 2>&1
served=$(awk '/^ +[0-9]+ +t/ {print $2}' "$tmp/rec.txt" | tr '\n' ' ')
offline=$(awk '/^ +[0-9]+\. / {print $2}' "$tmp/top.txt" | tr '\n' ' ')
check "served list (seen items left out by default) = offline 'plumb top' list [$served]" '[ -n "$served" ] && [ "$served" = "$offline" ]'
# Both include seen items only when asked, and then still agree: the whole catalogue (150
# items) comes back, the user's own items among them.
"$QUERY" recommend --server "$target" --user "$user" --count 150 --include-seen >"$tmp/rec_seen.txt" 2>&1
"$PLUMB" top --db "$tmp/db" --user "$user" --count 150 --include-seen >"$tmp/top_seen.txt" 2>&1
served_seen=$(awk '/^ +[0-9]+ +t/ {print $2}' "$tmp/rec_seen.txt" | tr '\n' ' ')
offline_seen=$(awk '/^ +[0-9]+\. / {print $2}' "$tmp/top_seen.txt" | tr '\n' ' ')
check "--include-seen: served = offline (150 items)" '[ "$(echo $served_seen | wc -w)" = 150 ] && [ "$served_seen" = "$offline_seen" ]'
seen_items=$(awk -F, -v u="$user" '$1 == u {print $2}' "$tmp/world/events.csv" | sort -u)
overlap=0; for i in $served_seen; do printf '%s\n' "$seen_items" | grep -qx "$i" && overlap=1; done
check "--include-seen brings back at least one item the user had (else the check proves nothing)" '[ $overlap -eq 1 ]'

"$QUERY" similar --server "$target" --item t0 --count 3 >"$tmp/sim.txt" 2>&1; rc=$?
check "similar prints 3 items, never the query item" \
  '[ $rc -eq 0 ] && [ "$(grep -cE "^ +[1-3] +t" "$tmp/sim.txt")" = 3 ] && ! grep -qE "^ +[0-9]+ +t0 " "$tmp/sim.txt"'
"$QUERY" rank --server "$target" --user "$user" --candidates t1,t2,zzz >"$tmp/rank.txt" 2>&1; rc=$?
check "rank orders the known candidates and lists the unknown one" \
  '[ $rc -eq 0 ] && [ "$(grep -cE "^ +[1-2] +t[12] " "$tmp/rank.txt")" = 2 ] && grep -q "not known to this version: zzz" "$tmp/rank.txt"'

# ---- errors: status code name + message, one line, non-zero exit ----------------------------------
out=$("$QUERY" recommend --server "$target" --user no-such-member 2>&1); rc=$?
check "unknown user: exit 1" '[ $rc -eq 1 ]'
check "unknown user: one line naming NOT_FOUND [$out]" \
  '[ "$(printf "%s\n" "$out" | wc -l)" -eq 1 ] && printf "%s" "$out" | grep -q "^plumb-query: NOT_FOUND: .*no-such-member"'
out=$("$QUERY" recommend --server "$target" --user no-such-member --fallback 2>&1); rc=$?
check "unknown user with --fallback: the most-interacted list, marked" \
  '[ $rc -eq 0 ] && printf "%s" "$out" | grep -q "fallback"'
out=$("$QUERY" recommend --server "$target" --user newcomer --recent t1,t2 --count 3 2>&1); rc=$?
check "unknown user with --recent: folded in, the recent items left out" \
  '[ $rc -eq 0 ] && printf "%s" "$out" | grep -q "folded in" && [ "$(printf "%s\n" "$out" | grep -cE "^ +[1-3] +t")" = 3 ] && ! printf "%s\n" "$out" | grep -qE "^ +[0-9]+ +t[12] "'
out=$("$QUERY" recommend --server "$target" 2>&1); rc=$?
check "missing --user: usage error exit 2, one line" '[ $rc -eq 2 ] && [ "$(printf "%s\n" "$out" | wc -l)" -eq 1 ]'
out=$("$QUERY" recommend --server "$target" --user "$user" --count 0 2>&1); rc=$?
check "count 0: usage error exit 2" '[ $rc -eq 2 ]'

# A trainer command sent to plumb-serve: UNIMPLEMENTED, and the message says who answers it.
out=$("$QUERY" status --trainer "$target" 2>&1); rc=$?
check "status against plumb-serve: exit 1, names plumb-train [$out]" \
  '[ $rc -eq 1 ] && printf "%s" "$out" | grep -q "^plumb-query: UNIMPLEMENTED.*answered by plumb-train"'

# ---- health ----------------------------------------------------------------------------------------
out=$("$QUERY" health --server "$target" 2>&1); rc=$?
check "health: SERVING, exit 0" '[ $rc -eq 0 ] && [ "$out" = SERVING ]'
out=$("$QUERY" health --server "$target" --health-service plumb.v1.Ranker 2>&1); rc=$?
check "health of plumb.v1.Ranker: SERVING" '[ $rc -eq 0 ] && [ "$out" = SERVING ]'
out=$("$QUERY" health --server "$target" --health-service no.such.Service 2>&1); rc=$?
check "health of an unknown service: NOT_FOUND, exit 1" '[ $rc -eq 1 ] && printf "%s" "$out" | grep -q "NOT_FOUND"'

for cmd in recommend similar rank health versions status activate auto-activate; do
  check "plumb-query $cmd --help" '"$QUERY" $cmd --help >/dev/null'
done
check "plumb-load --help" '"$LOAD" --help | grep -q -- "--publish-rate"'
check "plumb-load replay --help" '"$LOAD" replay --help | grep -q -- "--stream"'

# ---- TLS: a second server on the same store with a self-signed certificate for "localhost" ----
if command -v openssl >/dev/null 2>&1 &&
   openssl req -x509 -newkey rsa:2048 -nodes -days 1 -subj /CN=localhost \
     -addext subjectAltName=DNS:localhost -keyout "$tmp/key.pem" -out "$tmp/cert.pem" >/dev/null 2>&1; then
  "$SERVE" --db "$tmp/db" --listen 127.0.0.1:0 --metrics "" --tls-cert "$tmp/cert.pem" \
    --tls-key "$tmp/key.pem" 2>"$tmp/tls.log" &
  tls_pid=$!
  tls_port=$(wait_port "$tmp/tls.log" "listening on port" "$tls_pid")
  check "TLS server started" '[ -n "$tls_port" ]'
  tls=127.0.0.1:${tls_port:-1}
  out=$("$QUERY" health --server "$tls" --tls-ca "$tmp/cert.pem" --tls-server-name localhost 2>&1); rc=$?
  check "health over TLS: SERVING [$out]" '[ $rc -eq 0 ] && [ "$out" = SERVING ]'
  out=$("$QUERY" health --server "$tls" --deadline 2000ms 2>&1); rc=$?
  check "plain text to the TLS server: UNAVAILABLE, exit 1" '[ $rc -eq 1 ] && printf "%s" "$out" | grep -q "UNAVAILABLE"'
  "$LOAD" --server "$tls" --tls-ca "$tmp/cert.pem" --tls-server-name localhost --rpc health \
    --duration 0.5s --warmup 0s --concurrency 2 --json >"$tmp/tls.json" 2>/dev/null
  check "plumb-load over TLS: calls OK, zero errors" \
    '[ "$(json "$tmp/tls.json" "d[\"ok\"] > 0 and d[\"errors\"] == 0")" = True ]'
  kill "$tls_pid"; wait "$tls_pid" 2>/dev/null; tls_pid=""
else
  echo "skipped: TLS checks (no openssl)"
fi

# ---- a bearer token: the tools carry it, callers without it learn nothing -------------------------
printf 's3cret-serve-token\n' >"$tmp/token"; chmod 600 "$tmp/token"
"$SERVE" --db "$tmp/db" --listen 127.0.0.1:0 --metrics "" --token-file "$tmp/token" \
  2>"$tmp/token.log" &
tls_pid=$!
token_port=$(wait_port "$tmp/token.log" "listening on port" "$tls_pid")
check "server with a token started" '[ -n "$token_port" ]'
guarded=127.0.0.1:${token_port:-1}
user=$(awk -F, 'NR==2 {print $1}' "$tmp/world/events.csv")
out=$("$QUERY" recommend --server "$guarded" --user "$user" 2>&1); rc=$?
check "no token: UNAUTHENTICATED, exit 1" '[ $rc -eq 1 ] && printf "%s" "$out" | grep -q "UNAUTHENTICATED"'
out=$("$QUERY" recommend --server "$guarded" --user "no-such-member" 2>&1); rc=$?
check "no token, unknown user: UNAUTHENTICATED too (existence not revealed)" \
  '[ $rc -eq 1 ] && printf "%s" "$out" | grep -q "UNAUTHENTICATED"'
out=$("$QUERY" recommend --server "$guarded" --user "$user" --token-file "$tmp/token" 2>&1); rc=$?
check "with the token: answered" '[ $rc -eq 0 ]'
out=$("$QUERY" health --server "$guarded" 2>&1); rc=$?
check "health needs no token [$out]" '[ $rc -eq 0 ] && [ "$out" = SERVING ]'
"$LOAD" --server "$guarded" --token-file "$tmp/token" --db "$tmp/db" --duration 0.5s \
  --warmup 0s --concurrency 2 --json >"$tmp/token.json" 2>/dev/null
check "plumb-load with --token-file: calls OK, zero errors" \
  '[ "$(json "$tmp/token.json" "d[\"ok\"] > 0 and d[\"errors\"] == 0")" = True ]'
kill "$tls_pid"; wait "$tls_pid" 2>/dev/null; tls_pid=""

# ---- after the server stops: UNAVAILABLE ------------------------------------------------------------
kill "$serve_pid"; wait "$serve_pid" 2>/dev/null; serve_pid=""
out=$("$QUERY" health --server "$target" --deadline 2000ms 2>&1); rc=$?
check "stopped server: UNAVAILABLE, exit 1 [$out]" '[ $rc -eq 1 ] && printf "%s" "$out" | grep -q "^plumb-query: UNAVAILABLE"'
out=$("$LOAD" --server "$target" --rpc health --duration 1s --connect-timeout 1s 2>&1); rc=$?
check "plumb-load against nothing: exit 1, says it cannot reach" '[ $rc -eq 1 ] && printf "%s" "$out" | grep -q "cannot reach plumb-serve"'
exit $fail
