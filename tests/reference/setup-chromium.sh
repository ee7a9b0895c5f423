#!/usr/bin/env bash
# Makes sure a headless-capable Chromium is on the machine for the page test
# (tests/page_browser.rs), the way fetch-de421.sh puts the ephemeris in place.
#
# Source: Debian's `chromium` package (/usr/bin/chromium), installed with
# apt-get when missing. The test itself drives it over the DevTools protocol;
# nothing else (no chromedriver, no Node.js) is needed.
#
# Usage: bash tests/reference/setup-chromium.sh
# Safe to run again: it does nothing when a working chromium is found.
# Set PERIHELIX_CHROMIUM to use another binary (it is checked, not installed).
set -euo pipefail

works() {
    "$1" --headless --no-sandbox --disable-gpu --version >/dev/null 2>&1
}

if [[ -n "${PERIHELIX_CHROMIUM:-}" ]]; then
    if works "$PERIHELIX_CHROMIUM"; then
        echo "chromium from PERIHELIX_CHROMIUM: $("$PERIHELIX_CHROMIUM" --version)"
        exit 0
    fi
    echo "PERIHELIX_CHROMIUM=$PERIHELIX_CHROMIUM does not run" >&2
    exit 1
fi

for candidate in chromium chromium-browser; do
    if path="$(command -v "$candidate")" && works "$path"; then
        echo "chromium already in place: $path ($("$path" --version))"
        exit 0
    fi
done

how="Install Debian's chromium package (apt-get install chromium) or set PERIHELIX_CHROMIUM to a Chromium or Chrome binary."
if ! command -v apt-get >/dev/null 2>&1; then
    echo "no chromium found and no apt-get to install it. $how" >&2
    exit 1
fi
sudo=()
if [[ "$(id -u)" != 0 ]]; then
    if command -v sudo >/dev/null 2>&1; then
        sudo=(sudo -n)
    else
        echo "no chromium found, and installing it needs root. $how" >&2
        exit 1
    fi
fi

echo "installing Debian's chromium package (once per machine)"
export DEBIAN_FRONTEND=noninteractive
"${sudo[@]}" apt-get update -qq
"${sudo[@]}" apt-get install -y -qq --no-install-recommends chromium >/dev/null

if works /usr/bin/chromium; then
    echo "installed: $(/usr/bin/chromium --version)"
else
    echo "apt-get installed chromium but /usr/bin/chromium does not run. $how" >&2
    exit 1
fi
