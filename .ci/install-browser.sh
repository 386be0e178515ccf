#!/bin/sh
# Install Debian's Chromium for the real-browser tests (tests/browser).
# Idempotent: does nothing when /usr/bin/chromium already exists.
# Playwright's own browser download does not work on the CI machines, so the
# tests launch this binary instead.
set -eu

CHROMIUM=/usr/bin/chromium

if [ -x "$CHROMIUM" ]; then
    echo "install-browser: $CHROMIUM already present"
    exit 0
fi

if [ "$(id -u)" -eq 0 ]; then
    AS_ROOT=""
elif command -v sudo >/dev/null 2>&1; then
    AS_ROOT="sudo"
else
    echo "install-browser: need root (or sudo) to apt-get install chromium" >&2
    exit 1
fi

echo "install-browser: installing chromium with apt-get"
$AS_ROOT env DEBIAN_FRONTEND=noninteractive apt-get update -q
$AS_ROOT env DEBIAN_FRONTEND=noninteractive apt-get install -y -q chromium

if [ ! -x "$CHROMIUM" ]; then
    echo "install-browser: apt-get finished but $CHROMIUM is missing" >&2
    exit 1
fi
echo "install-browser: installed $("$CHROMIUM" --version 2>/dev/null || echo chromium)"
