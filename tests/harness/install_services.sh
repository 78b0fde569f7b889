#!/usr/bin/env bash
# Installs the servers the tests start privately, from Debian's packages, when they are missing:
# redis-server, and PostgreSQL (its binaries under /usr/lib/postgresql/<major>/bin).
# Installs only as root or with password-less sudo; otherwise says what to install and exits 1.
set -euo pipefail
need=()
command -v redis-server >/dev/null 2>&1 || need+=(redis-server)
if ! ls /usr/lib/postgresql/*/bin/initdb >/dev/null 2>&1 && ! command -v initdb >/dev/null 2>&1; then
  need+=(postgresql)
fi
if [ ${#need[@]} -eq 0 ]; then exit 0; fi

if [ "$(id -u)" -eq 0 ]; then
  SUDO=""
elif command -v sudo >/dev/null 2>&1 && sudo -n true 2>/dev/null; then
  SUDO="sudo -n"
else
  echo "drawyard's tests start private ${need[*]} servers, and ${need[*]} is not installed." >&2
  echo "Install it and run 'make test' again, e.g.:  sudo apt-get install ${need[*]}" >&2
  exit 1
fi
if ! command -v apt-get >/dev/null 2>&1; then
  echo "drawyard's tests need ${need[*]}; this machine has no apt-get, so install it by hand." >&2
  exit 1
fi

export DEBIAN_FRONTEND=noninteractive
echo "installing ${need[*]} from Debian's packages for the test servers"
$SUDO apt-get update -qq
$SUDO apt-get install -y -qq --no-install-recommends "${need[@]}" >/dev/null
# The packages may start system-wide servers; the tests use private ones on free ports instead.
if command -v service >/dev/null 2>&1; then
  $SUDO service redis-server stop >/dev/null 2>&1 || true
  $SUDO service postgresql stop >/dev/null 2>&1 || true
fi
