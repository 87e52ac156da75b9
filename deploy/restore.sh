#!/usr/bin/env bash
# Restore FILE (made by deploy/backup.sh) into the EMPTY database named by CALIBRANT_DATABASE_URL.
#
#   CALIBRANT_DATABASE_URL=postgresql+psycopg://user@host:5432/calibrant_new deploy/restore.sh calibrant.dump
#   CALIBRANT_DATABASE_URL=sqlite:///var/calibrant.db deploy/restore.sh calibrant-backup.db
#
# Refuses a target that already holds tables (PostgreSQL) or a file (SQLite): a restore never merges
# into or overwrites live data. Stop the service, restore into a new database, point the service at it.
# PostgreSQL: pg_restore in one transaction, so a failed restore leaves the target empty.
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
# shellcheck source=deploy/database_url.sh
. "$here/database_url.sh"

[ "$#" -eq 1 ] || { echo "usage: CALIBRANT_DATABASE_URL=... $0 FILE" >&2; exit 2; }
backup="$1"
[ -f "$backup" ] || { echo "restore: no backup file $backup" >&2; exit 1; }

case "$database_kind" in
  postgresql)
    url="$(libpq_url)"
    tables="$(psql --no-psqlrc --tuples-only --no-align --dbname="$url" --command \
      "SELECT count(*) FROM pg_tables WHERE schemaname NOT IN ('pg_catalog', 'information_schema')")"
    if [ "$tables" != "0" ]; then
      echo "restore: $(shown_url) already holds $tables table(s); restore into an empty database" >&2
      exit 1
    fi
    pg_restore --no-owner --no-privileges --single-transaction --exit-on-error --dbname="$url" "$backup"
    ;;
  sqlite)
    target="$(sqlite_path)"
    if [ -e "$target" ]; then
      echo "restore: $target exists; restore to a new path (or move the old file away first)" >&2
      exit 1
    fi
    partial="$target.partial.$$"
    trap 'rm -f "$partial"' EXIT
    "${PYTHON:-python3}" - "$backup" "$partial" <<'PY'
import sqlite3
import sys

backup = sqlite3.connect(f"file:{sys.argv[1]}?mode=ro", uri=True)
verdict = backup.execute("PRAGMA integrity_check").fetchone()[0]
if verdict != "ok":
    sys.exit(f"restore: the backup failed its integrity check: {verdict}")
target = sqlite3.connect(sys.argv[2])
backup.backup(target)
target.close()
backup.close()
PY
    mv "$partial" "$target"
    trap - EXIT
    ;;
esac
echo "restored $backup into $(shown_url)"
