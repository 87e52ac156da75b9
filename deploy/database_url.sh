# Sourced by backup.sh and restore.sh: read CALIBRANT_DATABASE_URL (a SQLAlchemy URL) for the shell tools.
# shellcheck shell=bash

url="${CALIBRANT_DATABASE_URL:?CALIBRANT_DATABASE_URL is not set: the database to back up or restore into}"

case "$url" in
  postgresql:* | postgresql+psycopg:*) database_kind=postgresql ;;
  sqlite:*) database_kind=sqlite ;;
  *) echo "CALIBRANT_DATABASE_URL must start with postgresql+psycopg:// or sqlite:///" >&2; exit 2 ;;
esac

# libpq (pg_dump, pg_restore, psql) takes postgresql://...; SQLAlchemy's +psycopg names the driver.
libpq_url() {
  echo "postgresql:${url#postgresql*:}"
}

# sqlite:///relative/path.db or sqlite:////absolute/path.db, without any ?query.
sqlite_path() {
  local path="${url#sqlite:///}"
  echo "${path%%\?*}"
}

# The URL without its password, for messages.
shown_url() {
  echo "$url" | sed -E 's#(://[^:/@]+):[^@]*@#\1:***@#'
}
