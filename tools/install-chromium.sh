#!/bin/sh
# Install Debian's headless-capable Chromium for the report's browser test
# (tests/test_report_browser.py). Idempotent: does nothing when it is present.
# Needs root (or sudo) and network access to the Debian archive.
set -eu
if [ -x /usr/bin/chromium ]; then
    exit 0
fi
SUDO=""
if [ "$(id -u)" -ne 0 ]; then
    if command -v sudo >/dev/null 2>&1; then
        SUDO="sudo"
    else
        echo "install-chromium.sh: need root (or sudo) to apt-get install chromium" >&2
        exit 1
    fi
fi
export DEBIAN_FRONTEND=noninteractive
$SUDO apt-get update -qq
$SUDO apt-get install -y -qq --no-install-recommends chromium >/dev/null
if [ ! -x /usr/bin/chromium ]; then
    echo "install-chromium.sh: apt-get finished but /usr/bin/chromium is missing" >&2
    exit 1
fi
