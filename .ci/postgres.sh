#!/usr/bin/env bash
# Start a throwaway PostgreSQL server on 127.0.0.1 for the store tests (installs Debian's postgresql if missing).
#
#   . .ci/postgres.sh        # sourced: exports HARKEN_TEST_PG_URL
#   .ci/postgres.sh          # run: writes the URL to $HARKEN_PG_DIR/url (default /tmp/harken-pg/url)
#
# Prints nothing but errors. Idempotent: a server already running in $HARKEN_PG_DIR is reused.
# Settings: HARKEN_PG_DIR (data, socket, log, url; default /tmp/harken-pg), HARKEN_PG_PORT (default 54329).

harken_pg_main() {
    local dir="${HARKEN_PG_DIR:-/tmp/harken-pg}" port="${HARKEN_PG_PORT:-54329}" bin as=()
    bin="$(ls -d /usr/lib/postgresql/*/bin 2>/dev/null | sort -V | tail -n 1 || true)"
    if [ -z "$bin" ]; then
        if [ "$(id -u)" != 0 ]; then
            echo "postgres.sh: PostgreSQL is not installed and this is not root (apt-get install postgresql)" >&2
            return 1
        fi
        apt-get update -qq >/dev/null 2>&1 || { echo "postgres.sh: apt-get update failed" >&2; return 1; }
        DEBIAN_FRONTEND=noninteractive apt-get install -y -qq postgresql >/dev/null 2>&1 \
            || { echo "postgres.sh: apt-get install postgresql failed" >&2; return 1; }
        bin="$(ls -d /usr/lib/postgresql/*/bin 2>/dev/null | sort -V | tail -n 1 || true)"
    fi
    mkdir -p "$dir" || return 1
    if [ "$(id -u)" = 0 ]; then
        # initdb refuses to run as root: the server runs as the postgres user the package created.
        id postgres >/dev/null 2>&1 || { echo "postgres.sh: no postgres user to run the server as" >&2; return 1; }
        chown postgres "$dir"
        as=(runuser -u postgres --)
    fi
    if ! "${as[@]}" "$bin/pg_ctl" -D "$dir/data" status >/dev/null 2>&1; then
        if [ ! -f "$dir/data/PG_VERSION" ]; then
            "${as[@]}" "$bin/initdb" -D "$dir/data" -U harken -A trust --no-sync -E UTF8 >"$dir/initdb.log" 2>&1 \
                || { echo "postgres.sh: initdb failed, see $dir/initdb.log" >&2; return 1; }
        fi
        "${as[@]}" "$bin/pg_ctl" -D "$dir/data" -l "$dir/server.log" -w -t 60 \
            -o "-c listen_addresses=127.0.0.1 -p $port -k $dir -c fsync=off" start >/dev/null \
            || { echo "postgres.sh: server did not start, see $dir/server.log" >&2; return 1; }
    fi
    if ! "$bin/psql" -h 127.0.0.1 -p "$port" -U harken -d postgres -tAc \
            "SELECT 1 FROM pg_database WHERE datname = 'harken_test'" 2>/dev/null | grep -q 1; then
        "$bin/createdb" -h 127.0.0.1 -p "$port" -U harken harken_test \
            || { echo "postgres.sh: createdb harken_test failed" >&2; return 1; }
    fi
    HARKEN_TEST_PG_URL="postgresql+psycopg://harken@127.0.0.1:$port/harken_test"
    export HARKEN_TEST_PG_URL
    printf '%s\n' "$HARKEN_TEST_PG_URL" >"$dir/url"
}

if [ "${BASH_SOURCE[0]}" = "$0" ]; then
    set -u
    harken_pg_main
    exit $?
else
    harken_pg_main
fi
