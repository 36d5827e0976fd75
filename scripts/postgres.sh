#!/usr/bin/env bash
# A throwaway PostgreSQL 15 server for the store's tests and benchmarks, in a folder of its own.
#
#   scripts/postgres.sh start DIR   initialise a cluster in DIR/data (first time only) and start it, listening on a
#                                   unix socket in DIR and on 127.0.0.1 at a free port; the last line printed is the
#                                   connection string (Npgsql syntax, over the socket), also written to
#                                   DIR/connection-string (and the loopback one to DIR/connection-string-tcp)
#   scripts/postgres.sh stop DIR    stop it (pg_ctl, fast shutdown)
#   scripts/postgres.sh restart DIR start a stopped cluster again on the port it had, so clients holding its connection
#                                   string reach it again (for tests of a store that goes away and comes back)
#
# Durability settings are PostgreSQL's defaults (fsync, synchronous_commit and full_page_writes on), so what the
# benchmarks measure holds for a real server; only memory and checkpoint spacing are set, modestly.
# Run as root it installs postgresql-15 when /usr/lib/postgresql/15/bin is missing (the Debian package may create and
# start a cluster of its own on port 5432; this script leaves that one alone) and runs the server as the postgres
# user; run as another user it runs the server as that user. Authentication is "trust": the server listens on the
# loopback address and on a socket in DIR only.
set -euo pipefail

usage() {
  echo "usage: $0 start DIR | stop DIR | restart DIR" >&2
  exit 2
}

[ $# -eq 2 ] || usage
action=$1
dir=$2
bin=/usr/lib/postgresql/15/bin

# As root the server runs as postgres (PostgreSQL refuses to run as root); otherwise as the caller.
as_owner() {
  if [ "$(id -u)" = 0 ]; then
    runuser -u postgres -- "$@"
  else
    "$@"
  fi
}

free_port() {
  if [ -x /usr/bin/python3 ]; then
    /usr/bin/python3 -c 'import socket; s = socket.socket(); s.bind(("127.0.0.1", 0)); print(s.getsockname()[1]); s.close()'
    return
  fi

  local port
  for port in $(seq 55432 55532); do
    if ! (exec 3<>"/dev/tcp/127.0.0.1/$port") 2>/dev/null; then
      echo "$port"
      return
    fi
  done

  echo "no free port found in 55432-55532" >&2
  exit 1
}

case "$action" in
  start)
    if [ ! -x "$bin/initdb" ]; then
      if [ "$(id -u)" != 0 ]; then
        echo "PostgreSQL 15 is not installed ($bin is missing): sudo apt-get install postgresql-15" >&2
        exit 1
      fi
      echo "installing postgresql-15" >&2
      apt-get update -q >&2
      DEBIAN_FRONTEND=noninteractive apt-get install -y -q --no-install-recommends postgresql-15 >&2
    fi

    mkdir -p "$dir"
    dir=$(cd "$dir" && pwd)
    # The socket path (DIR/.s.PGSQL.PORT) must fit in sun_path (107 bytes).
    if [ ${#dir} -gt 80 ]; then
      echo "DIR is too long for a unix socket path (${#dir} characters; at most 80): $dir" >&2
      exit 1
    fi
    if [ "$(id -u)" = 0 ]; then
      chown postgres: "$dir"
      if ! runuser -u postgres -- test -w "$dir"; then
        echo "the postgres user cannot reach $dir (a parent folder is closed to it); use a folder under /tmp" >&2
        exit 1
      fi
    fi

    if [ ! -f "$dir/data/PG_VERSION" ]; then
      as_owner "$bin/initdb" -D "$dir/data" -U postgres --auth=trust --encoding=UTF8 --locale=C.UTF-8 --no-instructions >"$dir/initdb.log" 2>&1 || {
        cat "$dir/initdb.log" >&2
        exit 1
      }
    fi

    if as_owner "$bin/pg_ctl" -D "$dir/data" status >/dev/null 2>&1; then
      echo "already running" >&2
    else
      port=$(free_port)
      # Written to postgresql.auto.conf's neighbour, read last: the port is chosen anew at every start.
      cat >"$dir/data/scorer.conf" <<EOF
listen_addresses = '127.0.0.1'
port = $port
unix_socket_directories = '$dir'
max_connections = 200
shared_buffers = 512MB
max_wal_size = 4GB
checkpoint_timeout = 15min
logging_collector = off
EOF
      chown --reference="$dir/data" "$dir/data/scorer.conf"
      grep -q "^include_if_exists = 'scorer.conf'" "$dir/data/postgresql.conf" \
        || echo "include_if_exists = 'scorer.conf'" >>"$dir/data/postgresql.conf"
      as_owner "$bin/pg_ctl" -D "$dir/data" -l "$dir/server.log" -w -t 60 start >&2 || {
        tail -n 30 "$dir/server.log" >&2
        exit 1
      }
    fi

    port=$(sed -n "s/^port = \([0-9]*\)$/\1/p" "$dir/data/scorer.conf")
    echo "Host=127.0.0.1;Port=$port;Username=postgres;Database=postgres" >"$dir/connection-string-tcp"
    echo "Host=$dir;Port=$port;Username=postgres;Database=postgres" >"$dir/connection-string"
    cat "$dir/connection-string"
    ;;
  stop)
    if [ ! -f "$dir/data/PG_VERSION" ]; then
      echo "no cluster in $dir/data" >&2
      exit 1
    fi
    if as_owner "$bin/pg_ctl" -D "$dir/data" status >/dev/null 2>&1; then
      as_owner "$bin/pg_ctl" -D "$dir/data" -m fast -w -t 60 stop >&2
    else
      echo "not running" >&2
    fi
    ;;
  restart)
    if [ ! -f "$dir/data/scorer.conf" ]; then
      echo "no cluster started by this script in $dir (start it first)" >&2
      exit 1
    fi
    if as_owner "$bin/pg_ctl" -D "$dir/data" status >/dev/null 2>&1; then
      echo "already running" >&2
    else
      as_owner "$bin/pg_ctl" -D "$dir/data" -l "$dir/server.log" -w -t 60 start >&2 || {
        tail -n 30 "$dir/server.log" >&2
        exit 1
      }
    fi
    cat "$dir/connection-string"
    ;;
  *)
    usage
    ;;
esac
