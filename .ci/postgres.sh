# shellcheck shell=bash
# Start a throw-away PostgreSQL cluster on loopback for the test suite.
PGPORT=${PGPORT:-55432}
PGDATA_DIR=${PGDATA_DIR:-/tmp/gaitscape-pg}

start_postgres() {
  local bindir
  bindir=$(ls -d /usr/lib/postgresql/*/bin | sort -V | tail -n 1)
  rm -rf "$PGDATA_DIR"
  mkdir -p "$PGDATA_DIR"
  chown postgres:postgres "$PGDATA_DIR"
  su postgres -c "$bindir/initdb -D $PGDATA_DIR -A trust -U postgres" >/dev/null
  su postgres -c "$bindir/pg_ctl -D $PGDATA_DIR -o '-p $PGPORT -k /tmp -c listen_addresses=127.0.0.1' -w start" >/dev/null
  su postgres -c "psql -h 127.0.0.1 -p $PGPORT -U postgres -c \"CREATE USER gaitscape PASSWORD 'gaitscape'\"" >/dev/null
  su postgres -c "psql -h 127.0.0.1 -p $PGPORT -U postgres -c 'CREATE DATABASE gaitscape OWNER gaitscape'" >/dev/null
  export PGPORT
  # A restart command for the test that checks the service survives the database
  # going away and coming back.
  cat > /tmp/gaitscape-pg-restart.sh <<EOS
#!/usr/bin/env bash
su postgres -c "$bindir/pg_ctl -D $PGDATA_DIR -o '-p $PGPORT -k /tmp -c listen_addresses=127.0.0.1' -m fast -w restart" >/dev/null
EOS
  chmod +x /tmp/gaitscape-pg-restart.sh
  export GAITSCAPE_TEST_PG_RESTART=/tmp/gaitscape-pg-restart.sh
  echo "PostgreSQL on 127.0.0.1:$PGPORT"
}

stop_postgres() {
  local bindir
  bindir=$(ls -d /usr/lib/postgresql/*/bin | sort -V | tail -n 1)
  su postgres -c "$bindir/pg_ctl -D $PGDATA_DIR -m fast stop" >/dev/null 2>&1 || true
}
