#!/usr/bin/env bash
# Installs the servers the tests start privately: redis-server and PostgreSQL, from Debian's packages.
set -euo pipefail
need=()
command -v redis-server >/dev/null 2>&1 || need+=(redis-server)
if ! ls /usr/lib/postgresql/*/bin/initdb >/dev/null 2>&1; then need+=(postgresql); fi
if [ ${#need[@]} -eq 0 ]; then exit 0; fi
if [ "$(id -u)" -ne 0 ] && ! command -v sudo >/dev/null 2>&1; then
  echo "drawyard tests need: ${need[*]}. Install them (apt-get install ${need[*]}) and run 'make test' again." >&2
  exit 1
fi
SUDO=""; [ "$(id -u)" -ne 0 ] && SUDO="sudo"
export DEBIAN_FRONTEND=noninteractive
echo "installing ${need[*]} from Debian's packages for the test servers"
$SUDO apt-get update -qq
$SUDO apt-get install -y -qq "${need[@]}" >/dev/null
# The packages start system-wide servers; the tests use private ones on free ports instead.
$SUDO service redis-server stop >/dev/null 2>&1 || true
$SUDO service postgresql stop >/dev/null 2>&1 || true
