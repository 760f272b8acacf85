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
# The example configurations' paths lie where the units let each process read and write, and
# the units' comments name the same store path as the configurations.
toml_value() { sed -n "s/^$2 *= *\"\([^\"]*\)\".*/\1/p" "$deploy_dir/$1"; }
unit_value() { sed -n "s/^$2=//p" "$units_dir/$1"; }
train_db=$(toml_value plumb-train.toml db); serve_db=$(toml_value plumb-serve.toml db)
scratch=$(toml_value plumb-serve.toml scratch_dir)
train_rw=$(unit_value plumb-train.service ReadWritePaths)
serve_ro=$(unit_value plumb-serve.service ReadOnlyPaths)
serve_rw=$(unit_value plumb-serve.service ReadWritePaths)
under() { case "$1/" in "$2"/*) return 0 ;; *) return 1 ;; esac; }
if [ "$train_db" = "$serve_db" ] && under "$train_db" "$train_rw" && under "$serve_db" "$serve_ro" \
   && under "$scratch" "$serve_rw"; then
  echo "ok: store $train_db is writable for plumb-train, readable for plumb-serve; scratch $scratch writable"
else
  echo "FAIL: paths disagree: train db $train_db (rw $train_rw), serve db $serve_db (ro $serve_ro), scratch $scratch (rw $serve_rw)"; fail=1
fi
for unit in plumb-serve plumb-train; do
  if grep -q "$train_db" "$units_dir/$unit.service"; then echo "ok: $unit.service's comment names $train_db"
  else echo "FAIL: $unit.service's comments do not name the store path $train_db"; fail=1; fi
done
# The server must not be bound to the trainer's lifetime.
if grep -Eq '^(Requires|BindsTo|PartOf)=.*plumb-train' "$units_dir/plumb-serve.service"; then
  echo "FAIL: plumb-serve.service is tied to plumb-train"; fail=1
fi
exit $fail
