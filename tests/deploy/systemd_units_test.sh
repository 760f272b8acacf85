#!/usr/bin/env bash
# systemd-analyze verify on deploy/systemd/*.service, with ExecStart pointed at the built
# binaries (the units name /usr/local/bin, where an installation puts them) and the config
# paths at the example files. Also checks the hardening the issue asks for is present.
set -euo pipefail
units_dir=$1; serve_bin=$2; train_bin=$3; deploy_dir=$4
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
fail=0
for unit in plumb-serve plumb-train; do
  bin=$serve_bin; [ $unit = plumb-train ] && bin=$train_bin
  sed -e "s|/usr/local/bin/$unit|$bin|" -e "s|/etc/plumb/|$deploy_dir/|" \
    "$units_dir/$unit.service" > "$tmp/$unit.service"
  if ! out=$(systemd-analyze verify "$tmp/$unit.service" 2>&1); then
    echo "FAIL: systemd-analyze verify $unit.service:"; echo "$out"; fail=1
  elif [ -n "$out" ]; then
    echo "FAIL: systemd-analyze verify $unit.service warned:"; echo "$out"; fail=1
  else
    echo "ok: $unit.service verifies"
  fi
  for key in NoNewPrivileges=yes ProtectSystem=strict User=plumb MemoryMax= Restart=; do
    if grep -q "^$key" "$units_dir/$unit.service"; then echo "ok: $unit has $key"
    else echo "FAIL: $unit.service lacks $key"; fail=1; fi
  done
done
# The server must not be bound to the trainer's lifetime.
if grep -Eq '^(Requires|BindsTo|PartOf)=.*plumb-train' "$units_dir/plumb-serve.service"; then
  echo "FAIL: plumb-serve.service is tied to plumb-train"; fail=1
fi
exit $fail
