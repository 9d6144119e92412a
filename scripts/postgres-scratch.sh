# A throwaway PostgreSQL cluster, to be sourced by bash scripts (scripts/test,
# scripts/with-scratch-postgres). Not run by itself.
#
# `scratch_postgres_start` makes a cluster with initdb in a fresh /tmp/brakeledger-ci-pg.XXXXXX
# directory (trust authentication, superuser `brakeledger`, no fsync at initdb), starts it on
# the first free port from 55432 (listening on 127.0.0.1 only, its unix socket in that
# directory), sets an EXIT trap that stops it and deletes the directory, and exports
#   BRAKELEDGER_TEST_POSTGRES_URL=postgres://brakeledger@127.0.0.1:PORT/postgres
# As root it runs the server as the `postgres` user the Debian package made (PostgreSQL
# refuses to run as root). PG_BIN names the directory of initdb and pg_ctl; when it is unset,
# the newest /usr/lib/postgresql/*/bin is used. Extra server settings can be given as
# arguments (`-c name=value ...`), after the defaults.

# The newest installed PostgreSQL's bin directory (empty when none is installed).
postgres_bin() {
  ls -d /usr/lib/postgresql/*/bin 2>/dev/null | sort -V | tail -n 1
}

# Runs a PostgreSQL server program as the user that may run it.
as_pg() { "$@"; }
if [ "$(id -u)" -eq 0 ]; then
  as_pg() { runuser -u postgres -- "$@"; }
fi

stop_postgres() {
  if [ -n "${PG_DIR:-}" ]; then
    as_pg "$PG_BIN/pg_ctl" -D "$PG_DIR/data" -m immediate stop >/dev/null 2>&1 || true
    rm -rf "$PG_DIR"
  fi
}

scratch_postgres_start() {
  PG_BIN="${PG_BIN:-$(postgres_bin)}"
  if [ -z "$PG_BIN" ] || [ ! -x "$PG_BIN/initdb" ]; then
    echo "no PostgreSQL server binaries (initdb) under /usr/lib/postgresql/*/bin: install Debian's postgresql package, or set PG_BIN" >&2
    return 1
  fi
  PG_DIR="$(mktemp -d /tmp/brakeledger-ci-pg.XXXXXX)" || return 1
  if [ "$(id -u)" -eq 0 ]; then chown postgres "$PG_DIR"; fi
  trap stop_postgres EXIT
  as_pg "$PG_BIN/initdb" -D "$PG_DIR/data" -A trust -U brakeledger --no-sync >"$PG_DIR/initdb.log" 2>&1 \
    || { cat "$PG_DIR/initdb.log" >&2; return 1; }
  PG_PORT=""
  local port
  for port in $(seq 55432 55531); do
    if as_pg "$PG_BIN/pg_ctl" -D "$PG_DIR/data" -l "$PG_DIR/server.log" -w -t 30 \
         -o "-p $port -k $PG_DIR -c listen_addresses=127.0.0.1 -c max_connections=300 $*" start >/dev/null 2>&1; then
      PG_PORT="$port"
      break
    fi
  done
  if [ -z "$PG_PORT" ]; then
    echo "could not start the throwaway PostgreSQL:" >&2
    cat "$PG_DIR/server.log" >&2 || true
    return 1
  fi
  echo "throwaway PostgreSQL ($("$PG_BIN/postgres" --version)) on 127.0.0.1:$PG_PORT"
  export BRAKELEDGER_TEST_POSTGRES_URL="postgres://brakeledger@127.0.0.1:$PG_PORT/postgres"
}
