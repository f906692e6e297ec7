#!/usr/bin/env bash
# The whole distributed stack on one machine, to try it: API, two workers and one beat against
# the local Redis and PostgreSQL, in the background, with logs and pid files under FOLDWISE_HOME.
#
#   deploy/start-local-stack.sh          start (creates the database, migrates, starts processes)
#   deploy/start-local-stack.sh stop     stop every process this script started
#   deploy/start-local-stack.sh status   which of them are running
#
# Settings (environment): FOLDWISE_HOME (default ./.foldwise-stack), FOLDWISE_STACK_DB (database
# name, default foldwise_stack), FOLDWISE_STACK_REDIS_DB (Redis database number, default 0),
# FOLDWISE_STACK_PORT (API port, default 8000), PGHOST/PGPORT/PGUSER (default 127.0.0.1, 5432,
# postgres, trust auth as on our machines).
set -euo pipefail

REPO="$(cd "$(dirname "$0")/.." && pwd)"
export FOLDWISE_HOME="${FOLDWISE_HOME:-$PWD/.foldwise-stack}"
DB_NAME="${FOLDWISE_STACK_DB:-foldwise_stack}"
PORT="${FOLDWISE_STACK_PORT:-8000}"
PGHOST="${PGHOST:-127.0.0.1}" PGPORT="${PGPORT:-5432}" PGUSER="${PGUSER:-postgres}"
export FOLDWISE_DATABASE_URL="${FOLDWISE_DATABASE_URL:-postgresql+psycopg://$PGUSER@$PGHOST:$PGPORT/$DB_NAME}"
export FOLDWISE_BROKER_URL="${FOLDWISE_BROKER_URL:-redis://127.0.0.1:6379/${FOLDWISE_STACK_REDIS_DB:-0}}"
FOLDWISE="${FOLDWISE:-$REPO/.venv/bin/foldwise}"
[ -x "$FOLDWISE" ] || FOLDWISE="$(command -v foldwise)"
LOGS="$FOLDWISE_HOME/logs" RUN="$FOLDWISE_HOME/run"
PROCESSES=(api w1 w2 beat)

running() { [ -f "$RUN/$1.pid" ] && kill -0 "$(cat "$RUN/$1.pid")" 2>/dev/null; }

start_one() {  # name, then the foldwise arguments
  local name="$1"; shift
  if running "$name"; then echo "$name already running (pid $(cat "$RUN/$name.pid"))"; return; fi
  # setsid: each process leads its own group, so `stop` ends its pool children with it
  setsid "$FOLDWISE" "$@" >"$LOGS/$name.log" 2>&1 < /dev/null &
  echo $! >"$RUN/$name.pid"
  echo "$name started (pid $!, log $LOGS/$name.log)"
}

start() {
  mkdir -p "$LOGS" "$RUN"
  pg_isready -q -h "$PGHOST" -p "$PGPORT" || { echo "PostgreSQL is not answering on $PGHOST:$PGPORT" >&2; exit 1; }
  redis-cli -u "$FOLDWISE_BROKER_URL" ping >/dev/null || { echo "Redis is not answering at $FOLDWISE_BROKER_URL" >&2; exit 1; }
  if [ -z "$(psql -h "$PGHOST" -p "$PGPORT" -U "$PGUSER" -d postgres -Atc "SELECT 1 FROM pg_database WHERE datname = '$DB_NAME'")" ]; then
    createdb -h "$PGHOST" -p "$PGPORT" -U "$PGUSER" "$DB_NAME"
    echo "created database $DB_NAME"
  fi
  # migrations are a deploy step, before any service starts
  "$FOLDWISE" db upgrade
  start_one api serve --host 127.0.0.1 --port "$PORT"
  start_one w1 worker --concurrency 1 --name "w1@%h"
  start_one w2 worker --concurrency 1 --name "w2@%h"
  start_one beat beat  # exactly one per deployment
  for _ in $(seq 1 60); do
    curl -fsS "http://127.0.0.1:$PORT/healthz" >/dev/null 2>&1 && break
    sleep 0.5
  done
  curl -fsS "http://127.0.0.1:$PORT/healthz" >/dev/null || { echo "the API did not come up; see $LOGS/api.log" >&2; exit 1; }
  cat <<INFO
foldwise is up: http://127.0.0.1:$PORT (OpenAPI at /docs)
  store  $FOLDWISE_DATABASE_URL
  broker $FOLDWISE_BROKER_URL
  home   $FOLDWISE_HOME
a token: FOLDWISE_HOME=$FOLDWISE_HOME FOLDWISE_DATABASE_URL=$FOLDWISE_DATABASE_URL $FOLDWISE token create --team demo --scopes submit,read
stop:    $0 stop
INFO
}

stop() {
  for name in "${PROCESSES[@]}"; do
    if running "$name"; then
      kill -TERM -- "-$(cat "$RUN/$name.pid")" 2>/dev/null || true
    fi
  done
  for name in "${PROCESSES[@]}"; do
    [ -f "$RUN/$name.pid" ] || continue
    pid="$(cat "$RUN/$name.pid")"
    for _ in $(seq 1 40); do kill -0 "$pid" 2>/dev/null || break; sleep 0.25; done
    kill -KILL -- "-$pid" 2>/dev/null || true
    rm -f "$RUN/$name.pid"
    echo "$name stopped"
  done
}

status() {
  for name in "${PROCESSES[@]}"; do
    if running "$name"; then echo "$name running (pid $(cat "$RUN/$name.pid"))"; else echo "$name stopped"; fi
  done
}

case "${1:-start}" in
  start) start ;;
  stop) stop ;;
  status) status ;;
  *) echo "usage: $0 [start|stop|status]" >&2; exit 2 ;;
esac
