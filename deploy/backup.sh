#!/usr/bin/env bash
# Back up the Calibrant database named by CALIBRANT_DATABASE_URL into FILE, while the service runs.
#
#   CALIBRANT_DATABASE_URL=postgresql+psycopg://user@host:5432/calibrant deploy/backup.sh calibrant.dump
#   CALIBRANT_DATABASE_URL=sqlite:///var/calibrant.db deploy/backup.sh calibrant-backup.db
#
# PostgreSQL: pg_dump's custom format (one consistent snapshot; restore with deploy/restore.sh).
# SQLite: the online backup API of Python's sqlite3 (a consistent copy even while writers work),
# checked with PRAGMA integrity_check. FILE is written under a temporary name and renamed when complete.
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
# shellcheck source=deploy/database_url.sh
. "$here/database_url.sh"

[ "$#" -eq 1 ] || { echo "usage: CALIBRANT_DATABASE_URL=... $0 FILE" >&2; exit 2; }
target="$1"
partial="$target.partial.$$"
trap 'rm -f "$partial"' EXIT

case "$database_kind" in
  postgresql)
    pg_dump --format=custom --no-owner --no-privileges --file="$partial" --dbname="$(libpq_url)"
    ;;
  sqlite)
    source_path="$(sqlite_path)"
    [ -f "$source_path" ] || { echo "backup: no SQLite database at $source_path" >&2; exit 1; }
    "${PYTHON:-python3}" - "$source_path" "$partial" <<'PY'
import sqlite3
import sys

source = sqlite3.connect(sys.argv[1])
copy = sqlite3.connect(sys.argv[2])
source.backup(copy)  # page by page, consistent with concurrent writers (SQLite online backup API)
source.close()
verdict = copy.execute("PRAGMA integrity_check").fetchone()[0]
copy.close()
if verdict != "ok":
    sys.exit(f"backup: the copy failed its integrity check: {verdict}")
PY
    ;;
esac
mv "$partial" "$target"
trap - EXIT
echo "backup of $(shown_url) written to $target"
