#!/usr/bin/env bash
# Installs Debian's Chromium (/usr/bin/chromium) for the browser tests in tests/web when it is
# missing. The test tool's own browser download cannot run here, so the tests drive this one.
# Installs only as root or with password-less sudo; otherwise says what to install and exits 1.
set -euo pipefail
if [ -x /usr/bin/chromium ]; then exit 0; fi

if [ "$(id -u)" -eq 0 ]; then
  SUDO=""
elif command -v sudo >/dev/null 2>&1 && sudo -n true 2>/dev/null; then
  SUDO="sudo -n"
else
  echo "drawyard's browser tests drive /usr/bin/chromium, which is not installed." >&2
  echo "Install it and run 'make test' again, e.g.:  sudo apt-get install chromium" >&2
  exit 1
fi
if ! command -v apt-get >/dev/null 2>&1; then
  echo "drawyard's browser tests need /usr/bin/chromium; this machine has no apt-get." >&2
  exit 1
fi

export DEBIAN_FRONTEND=noninteractive
echo "installing chromium from Debian's packages for the browser tests"
$SUDO apt-get update -qq
$SUDO apt-get install -y -qq --no-install-recommends chromium >/dev/null
