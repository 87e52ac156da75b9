#!/bin/sh
# Start Calibrant in a container or under systemd: wait for the database, migrate, then serve.
#
#   entrypoint.sh [serve [options]]   wait, migrate, then `calibrant serve` (the default)
#   entrypoint.sh scheduler           wait, then run the scheduled jobs (no migration: serve does it)
#   entrypoint.sh <any other command> `calibrant <command>`, e.g. `keys create --scope admin`
#
# Settings come from CALIBRANT_* variables: CALIBRANT_DATABASE_URL, CALIBRANT_HOST, CALIBRANT_PORT,
# CALIBRANT_WORKERS (more than 1 needs PostgreSQL), CALIBRANT_LOG_FORMAT; CALIBRANT_DB_WAIT_SECONDS
# bounds the wait for the database (default 60), CALIBRANT_COMMAND names the executable.
set -eu

calibrant="${CALIBRANT_COMMAND:-calibrant}"
wait_seconds="${CALIBRANT_DB_WAIT_SECONDS:-60}"

command="${1:-serve}"
[ "$#" -gt 0 ] && shift

case "$command" in
  serve)
    "$calibrant" migrate --wait "$wait_seconds"
    # exec: the server becomes this process, so it receives the stop signal itself.
    exec "$calibrant" serve "$@"
    ;;
  scheduler)
    "$calibrant" wait --timeout "$wait_seconds"
    exec "$calibrant" scheduler "$@"
    ;;
  *)
    exec "$calibrant" "$command" "$@"
    ;;
esac
