#!/usr/bin/env bash
# A throwaway PostgreSQL for the cluster checks: `start DIR` creates a cluster in DIR (trust auth, 127.0.0.1 only, a
# free port), starts it as a background daemon and prints its Npgsql connection string; `stop DIR` stops it and
# removes DIR. Uses Debian's postgresql package (its binaries under /usr/lib/postgresql/*/bin); run as root or as
# the postgres user.
set -euo pipefail
cmd="${1:?usage: postgres_service.sh start|stop DIR}"
dir="${2:?usage: postgres_service.sh start|stop DIR}"
bin="$(ls -d /usr/lib/postgresql/*/bin 2>/dev/null | sort -V | tail -n 1)"
[ -x "$bin/pg_ctl" ] || { echo "postgres_service: Debian's postgresql package is not installed" >&2; exit 2; }
as_pg() { if [ "$(id -u)" = 0 ]; then runuser -u postgres -- "$@"; else "$@"; fi; }

case "$cmd" in
  start)
    port="$(python3 -c 'import socket; s=socket.socket(); s.bind(("127.0.0.1",0)); print(s.getsockname()[1])')"
    mkdir -p "$dir"
    [ "$(id -u)" = 0 ] && chown postgres:postgres "$dir"
    as_pg "$bin/initdb" -D "$dir/data" -U fleet --auth=trust -E UTF8 --locale=C.UTF-8 >/dev/null
    as_pg "$bin/pg_ctl" -D "$dir/data" -l "$dir/postgres.log" -w -t 60 \
      -o "-c listen_addresses=127.0.0.1 -p $port -k $dir -c fsync=off -c max_connections=200" start >/dev/null
    as_pg "$bin/createdb" -h 127.0.0.1 -p "$port" -U fleet fleet
    echo "Host=127.0.0.1;Port=$port;Username=fleet;Database=fleet"
    ;;
  stop)
    if [ -d "$dir/data" ]; then as_pg "$bin/pg_ctl" -D "$dir/data" -m fast -w stop >/dev/null || true; fi
    rm -rf "$dir"
    ;;
  *) echo "postgres_service: unknown command $cmd" >&2; exit 2 ;;
esac
