#!/usr/bin/env bash
# Install (Debian packages) and start what the test suite needs, on loopback only:
# PostgreSQL, Redis, headless Chromium for browser tests, poppler (pdftotext/pdftoppm) and the
# Pango libraries WeasyPrint renders with. Safe to run again: it only does what is missing.
set -euo pipefail

need=()
command -v pg_ctlcluster >/dev/null 2>&1 || need+=(postgresql)
command -v redis-server  >/dev/null 2>&1 || need+=(redis-server)
command -v chromium      >/dev/null 2>&1 || need+=(chromium)
command -v pdftotext     >/dev/null 2>&1 || need+=(poppler-utils)
ldconfig -p | grep libpangoft2-1.0 >/dev/null || need+=(libpango-1.0-0 libpangoft2-1.0-0)
fc-list 2>/dev/null | grep -i dejavu >/dev/null || need+=(fonts-dejavu-core)

if [ ${#need[@]} -gt 0 ]; then
  echo "ensure-services: installing ${need[*]}"
  SUDO=""; [ "$(id -u)" -eq 0 ] || SUDO="sudo"
  $SUDO apt-get update -qq
  DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -qq "${need[@]}" >/dev/null
fi

# PostgreSQL: start the cluster if it is not accepting connections.
if ! pg_isready -q -h /var/run/postgresql; then
  ver=$(ls /etc/postgresql | sort -V | tail -n 1)
  echo "ensure-services: starting PostgreSQL $ver"
  pg_ctlcluster --skip-systemctl-redirect "$ver" main start
  for _ in $(seq 1 30); do pg_isready -q -h /var/run/postgresql && break; sleep 1; done
fi
me=$(id -un)
as_pg() { if [ "$me" = postgres ]; then "$@"; elif [ "$(id -u)" -eq 0 ]; then su postgres -c "$(printf '%q ' "$@")"; else sudo -u postgres "$@"; fi; }
if ! psql -h /var/run/postgresql -d postgres -tAc "select 1" >/dev/null 2>&1; then
  echo "ensure-services: creating PostgreSQL role $me"
  as_pg createuser -h /var/run/postgresql --superuser "$me"
fi
if ! psql -h /var/run/postgresql -d postgres -tAc "select 1 from pg_database where datname='fleetsvc'" | grep -q 1; then
  createdb -h /var/run/postgresql fleetsvc
fi

# Redis: loopback only, nothing kept on disk.
if ! redis-cli -h 127.0.0.1 -p 6379 ping >/dev/null 2>&1; then
  echo "ensure-services: starting Redis on 127.0.0.1:6379"
  mkdir -p /tmp/fleetsvc-redis
  redis-server --daemonize yes --bind 127.0.0.1 --port 6379 --save "" --appendonly no \
    --dir /tmp/fleetsvc-redis --logfile /tmp/fleetsvc-redis/redis.log
  for _ in $(seq 1 30); do redis-cli -h 127.0.0.1 -p 6379 ping >/dev/null 2>&1 && break; sleep 0.5; done
fi
echo "ensure-services: PostgreSQL $(psql -h /var/run/postgresql -d postgres -tAc 'show server_version') and Redis $(redis-cli -h 127.0.0.1 -p 6379 info server | grep redis_version | cut -d: -f2 | tr -d '\r') ready"
