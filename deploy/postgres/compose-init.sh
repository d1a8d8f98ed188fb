#!/bin/sh
# Run by the PostgreSQL container image on its first start (mounted into
# /docker-entrypoint-initdb.d by deploy/compose.yaml): the wellspan role and database, with the
# password from the compose secret. Paths can be overridden for a run outside the container.
set -eu
setup_sql=${WELLSPAN_SETUP_SQL:-/wellspan/setup.sql}
password_file=${WELLSPAN_DB_PASSWORD_FILE:-/run/secrets/wellspan_db_password}

[ -r "$password_file" ] || { echo "compose-init.sh: cannot read $password_file" >&2; exit 1; }
password=$(head -n 1 "$password_file")
[ -n "$password" ] || { echo "compose-init.sh: $password_file is empty" >&2; exit 1; }

psql -v ON_ERROR_STOP=1 --username "${POSTGRES_USER:-postgres}" --dbname postgres \
  -v wellspan_password="$password" -f "$setup_sql"
