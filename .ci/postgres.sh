#!/usr/bin/env bash
# A throwaway PostgreSQL cluster for the store's tests, in .foldwise/pg inside the checkout.
#
#   .ci/postgres.sh start       install Debian's postgresql if initdb is missing, create the cluster once,
#                               start it on 127.0.0.1 (trust, loopback only) and a Unix socket in its
#                               folder, create the database foldwise_test, write its URL to .foldwise/pg/url
#   .ci/postgres.sh stop        stop it
#   .ci/postgres.sh with CMD..  run CMD with FOLDWISE_TEST_PG_URL set, stop the cluster after it, exit as
#                               CMD did. Required under CI or FOLDWISE_PG=1; otherwise tried only when
#                               initdb is at hand, and without it the PostgreSQL tests skip and say why.
#
# start and stop may be called again at any time. `with` records itself as a holder, and stops the server
# only when no other live holder remains, so two test runs in one checkout do not stop each other's server.
set -euo pipefail
script=$(readlink -f "$0")
cd "$(dirname "$script")/.."

folder="$PWD/.foldwise/pg"
data="$folder/data"  # or a link to a folder in /tmp, where the checkout is out of the server user's reach
holders="$folder/holders"
first_port=54329

find_bin_dir() {  # Debian keeps the server programs in /usr/lib/postgresql/<version>/bin, off PATH
  local initdb
  initdb=$(command -v initdb || ls -d /usr/lib/postgresql/*/bin/initdb 2>/dev/null | sort -V | tail -n 1 \
           || true)
  [ -n "$initdb" ] && dirname "$(readlink -f "$initdb")"
}

as_owner() {  # initdb and the server refuse to run as root
  if [ "$(id -u)" = 0 ]; then (cd / && runuser -u postgres -- "$@"); else "$@"; fi
}

locked() {  # "$@" holding the cluster's lock, released when it returns
  (exec 9>"$folder/lock"; flock 9; "$@")
}

port_in_use() { (exec 3<>"/dev/tcp/127.0.0.1/$1") 2>/dev/null; }

running() { [ -n "${bin:-}" ] && [ -d "$data" ] && as_owner "$bin/pg_ctl" status -D "$data" >/dev/null 2>&1; }

live_holders() {  # holders whose process is still alive; stale records are removed
  local record
  for record in "$holders"/*; do
    [ -e "$record" ] || continue
    if kill -0 "${record##*/}" 2>/dev/null; then echo "${record##*/}"; else rm -f "$record"; fi
  done
}

install_postgresql() {
  if [ "$(id -u)" != 0 ] || ! command -v apt-get >/dev/null 2>&1; then
    echo "postgres.sh: initdb not found; install Debian's postgresql package (or run as root)" >&2
    return 1
  fi
  echo "postgres.sh: installing Debian's postgresql" >&2
  apt-get update -qq
  DEBIAN_FRONTEND=noninteractive apt-get install -y -qq postgresql >/dev/null
}

owned_folder() {  # an empty folder $1 that the server's user owns and can reach
  mkdir -p "$1"
  if [ "$(id -u)" = 0 ]; then chown postgres: "$1"; fi
  chmod 700 "$1"
  as_owner test -w "$1"
}

create_cluster() {
  rm -rf "$folder/data"
  data="$folder/data"
  # A socket path longer than 107 bytes cannot be bound; a checkout under a private home cannot be reached.
  if [ ${#data} -gt 90 ] || ! owned_folder "$data"; then
    rm -rf "$data"
    data=$(mktemp -d /tmp/foldwise-pg.XXXXXX)
    owned_folder "$data"
    ln -s "$data" "$folder/data"
    echo "postgres.sh: cluster kept in $data (linked from .foldwise/pg/data)" >&2
  fi
  as_owner "$bin/initdb" -D "$data" -U postgres --auth=trust --encoding=UTF8 --locale=C >/dev/null
  # Throwaway test data: durability is not wanted, speed is.
  cat >>"$data/postgresql.conf" <<EOF
listen_addresses = '127.0.0.1'
unix_socket_directories = '$data'
fsync = off
synchronous_commit = off
full_page_writes = off
EOF
  printf '%s\n' "local all all trust" "host all all 127.0.0.1/32 trust" >"$data/pg_hba.conf"
}

start() {
  bin=$(find_bin_dir) || { install_postgresql && bin=$(find_bin_dir); }
  if [ -n "${FOLDWISE_PG_HOLDER:-}" ]; then mkdir -p "$holders" && : >"$holders/$FOLDWISE_PG_HOLDER"; fi
  local state="already running" port=$first_port
  if ! running; then
    [ -f "$data/PG_VERSION" ] || create_cluster
    while port_in_use "$port"; do port=$((port + 1)); done
    # 9>&-: the server must not inherit, and so hold, the lock.
    as_owner "$bin/pg_ctl" start -D "$data" -w -t 60 -l "$data/server.log" -o "-p $port" >/dev/null 9>&-
    state="started"
  fi
  port=$(sed -n 4p "$data/postmaster.pid")  # the running server's port, however it was started
  if ! "$bin/psql" -h 127.0.0.1 -p "$port" -U postgres -d postgres -tAc \
      "SELECT 1 FROM pg_database WHERE datname = 'foldwise_test'" | grep -q 1; then
    "$bin/createdb" -h 127.0.0.1 -p "$port" -U postgres foldwise_test
  fi
  echo "postgresql+psycopg://postgres@127.0.0.1:$port/foldwise_test" >"$folder/url"
  echo "postgres.sh: $state, $(cat "$folder/url")" >&2
}

stop() {
  bin=$(find_bin_dir) || return 0
  if [ -n "${FOLDWISE_PG_HOLDER:-}" ]; then
    rm -f "$holders/$FOLDWISE_PG_HOLDER"
    if [ -n "$(live_holders)" ]; then
      echo "postgres.sh: left running for another test run" >&2
      return
    fi
  fi
  if running; then as_owner "$bin/pg_ctl" stop -D "$data" -m fast -w >/dev/null; fi
  rm -f "$folder/url"
  echo "postgres.sh: stopped" >&2
}

with_cluster() {
  if [ -n "${FOLDWISE_TEST_PG_URL:-}" ]; then exec "$@"; fi  # a server of the caller's own
  local required=""
  if [ -n "${CI:-}" ] || [ "${FOLDWISE_PG:-}" = 1 ]; then required=1; fi
  if [ -z "$required" ] && ! find_bin_dir >/dev/null; then
    echo "postgres.sh: no initdb here, so the PostgreSQL tests skip (FOLDWISE_PG=1 installs one)" >&2
    exec "$@"
  fi
  export FOLDWISE_PG_HOLDER=$$
  # As commands of their own, so that `set -e` holds inside them (a tested function ignores it).
  if ! bash "$script" start; then
    if [ -n "$required" ]; then echo "postgres.sh: could not start PostgreSQL" >&2; exit 1; fi
    echo "postgres.sh: could not start PostgreSQL, so its tests skip" >&2
    exec "$@"
  fi
  trap 'bash "$script" stop; exit 130' INT TERM
  local status=0
  FOLDWISE_TEST_PG_URL=$(cat "$folder/url") "$@" || status=$?
  bash "$script" stop
  exit "$status"
}

mkdir -p "$folder"
if [ -L "$data" ]; then data=$(readlink -f "$data"); fi
case "${1:-}" in
  start) locked start ;;
  stop) locked stop ;;
  with) shift; with_cluster "$@" ;;
  *) echo "usage: $0 start | stop | with COMMAND... (received '${1:-}')" >&2; exit 2 ;;
esac
