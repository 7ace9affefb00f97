#!/bin/sh
# Install Debian's chromium for the report's browser test, only where it is missing.
# Called by .ci/run; needs root (or sudo) and access to the Debian package mirrors.
set -eu

if [ -x /usr/bin/chromium ]; then
    echo "chromium present: $(/usr/bin/chromium --version 2>/dev/null || echo /usr/bin/chromium)"
    exit 0
fi

if [ "$(id -u)" -eq 0 ]; then
    SUDO=""
elif command -v sudo >/dev/null 2>&1; then
    SUDO="sudo"
else
    echo "install_chromium.sh: /usr/bin/chromium is missing and this user cannot install it" >&2
    echo "  hint: run as root, or apt-get install chromium" >&2
    exit 1
fi

export DEBIAN_FRONTEND=noninteractive
$SUDO apt-get update
$SUDO apt-get install -y --no-install-recommends chromium fonts-dejavu-core
/usr/bin/chromium --version
