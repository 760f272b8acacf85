#!/usr/bin/env bash
# systemd-analyze verify on deploy/systemd/*.service, with ExecStart pointed at the built
# binaries (the units name /usr/local/bin, where an installation puts them; plumb-nats names
# Debian's /usr/sbin/nats-server) and the config paths at the example files. Also checks the
# hardening the issue asks for is present, and that the example configurations' paths are
# where the units let each process read and write.
set -euo pipefail
units_dir=$1; serve_bin=$2; train_bin=$3; deploy_dir=$4
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
fail=0
echo "NATS_CLIENT_TOKEN=example" > "$tmp/server.env"
for unit in plumb-serve plumb-train plumb-replica plumb-nats; do
  case $unit in
    plumb-serve|plumb-replica) bin=$serve_bin; binary=plumb-serve; user=plumb ;;
    plumb-train) bin=$train_bin; binary=plumb-train; user=plumb ;;
    plumb-nats) bin=/usr/sbin/nats-server; binary=nats-server; user=nats ;;
  esac
  sed -e "s|/usr/local/bin/$binary|$bin|" \
      -e "s|/etc/plumb/nats/nats-server.conf|$deploy_dir/nats/nats-server.conf|" \
      -e "s|/etc/plumb/nats/server.env|$tmp/server.env|" \
      -e "s|/etc/plumb/|$deploy_dir/|" \
    "$units_dir/$unit.service" > "$tmp/$unit.service"
  if ! out=$(systemd-analyze verify "$tmp/$unit.service" 2>&1); then
    echo "FAIL: systemd-analyze verify $unit.service:"; echo "$out"; fail=1
  elif [ -n "$out" ]; then
    echo "FAIL: systemd-analyze verify $unit.service warned:"; echo "$out"; fail=1
  else
    echo "ok: $unit.service verifies"
  fi
  for key in NoNewPrivileges=yes ProtectSystem=strict User=$user MemoryMax= Restart= \
             CapabilityBoundingSet= SystemCallFilter=; do
    if grep -q "^$key" "$units_dir/$unit.service"; then echo "ok: $unit has $key"
    else echo "FAIL: $unit.service lacks $key"; fail=1; fi
  done
  # Every file the unit starts from exists in the repository or the installation.
  for path in $(sed -n 's/^Exec\(Start\|StartPre\)=[^ ]* .*-c \([^ ]*\).*/\2/p;
                       s/^ExecStart=[^ ]* --config \([^ ]*\).*/\1/p' "$tmp/$unit.service" | sort -u); do
    if [ -f "$path" ]; then echo "ok: $unit's configuration $path exists"
    else echo "FAIL: $unit.service starts from $path, which does not exist"; fail=1; fi
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

# A remote replica: its own directory is its state directory and its only writable path; the
# trainer's store is hidden from it; it follows NATS, not a store, and is tied to no unit.
replica_db=$(toml_value plumb-replica.toml db)
replica_state=/var/lib/$(unit_value plumb-replica.service StateDirectory)
replica_rw=$(unit_value plumb-replica.service ReadWritePaths)
if [ -n "$(toml_value plumb-replica.toml replica_of)" ] && under "$replica_db" "$replica_state" \
   && [ "$replica_rw" = "$replica_state" ]; then
  echo "ok: the replica's directory $replica_db is its state directory and only writable path"
else
  echo "FAIL: replica db $replica_db, state directory $replica_state, writable $replica_rw, replica_of '$(toml_value plumb-replica.toml replica_of)'"; fail=1
fi
if under "$replica_db" "$(dirname "$train_db")"; then
  echo "FAIL: the replica's directory $replica_db lies in the trainer's $(dirname "$train_db")"; fail=1
fi
if unit_value plumb-replica.service ReadOnlyPaths | grep -q . ; then
  echo "FAIL: plumb-replica.service may read $(unit_value plumb-replica.service ReadOnlyPaths)"; fail=1
fi
if unit_value plumb-replica.service InaccessiblePaths | grep -qx -- "-\?$(dirname "$train_db")"; then
  echo "ok: plumb-replica.service cannot see the trainer's $(dirname "$train_db")"
else
  echo "FAIL: plumb-replica.service does not hide the trainer's $(dirname "$train_db")"; fail=1
fi
if grep -Eq '^(Requires|BindsTo|PartOf|After)=.*(plumb-train|plumb-nats)' "$units_dir/plumb-replica.service"; then
  echo "FAIL: plumb-replica.service is tied to another unit"; fail=1
fi

# A NATS node: the store directory of nats-server.conf is the unit's state directory, Debian's
# own unit for the same server is excluded, and the per-host variables the file uses are
# exactly those the unit's comment and environment file provide.
nats_conf=$deploy_dir/nats/nats-server.conf
store_dir=$(sed -n 's/^ *store_dir: *"\([^"]*\)".*/\1/p' "$nats_conf")
if [ "$store_dir" = "/var/lib/$(unit_value plumb-nats.service StateDirectory)" ] \
   && [ "$store_dir" = "$(unit_value plumb-nats.service ReadWritePaths)" ]; then
  echo "ok: the JetStream store $store_dir is plumb-nats' state directory"
else
  echo "FAIL: store_dir $store_dir, plumb-nats StateDirectory $(unit_value plumb-nats.service StateDirectory)"; fail=1
fi
if grep -q '^Conflicts=nats-server.service' "$units_dir/plumb-nats.service"; then
  echo "ok: plumb-nats conflicts with Debian's nats-server.service"
else
  echo "FAIL: plumb-nats.service does not exclude Debian's nats-server.service"; fail=1
fi
vars=$(grep -v '^ *#' "$nats_conf" | grep -o '\$[A-Z_]*' | sort -u | tr '\n' ' ')
for v in $vars; do
  if grep -q "^#.*Environment=.*${v#\$}=\|^#.*${v#\$}=\.\.\." "$units_dir/plumb-nats.service"; then
    echo "ok: plumb-nats.service says where $v is set"
  else
    echo "FAIL: nats-server.conf uses $v, which plumb-nats.service does not set"; fail=1
  fi
done
if [ -x /usr/sbin/nats-server ]; then
  # The file as the unit starts it, with the variables the drop-in and environment file set.
  if out=$(env NATS_NAME=nats-1 NATS_HOST=127.0.0.1 NATS_CLIENT_TOKEN=example \
           /usr/sbin/nats-server -t -c "$nats_conf" 2>&1); then
    echo "ok: $out"
  else
    echo "FAIL: nats-server -t: $out"; fail=1
  fi
fi
exit $fail
